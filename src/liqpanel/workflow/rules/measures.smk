# measures: daily table of each month (+ the previous month's last days,
# flagged, for day-pair estimators) -> monthly measures (liqpanel.measures),
# one job per span of months
for SPAN in SPANS:

    rule:
        name:
            span_rule("measures", SPAN)
        input:
            daily=month_files(f"{WORK}/daily/month={{month}}/daily.parquet", SPAN),
            previous=month_files(f"{WORK}/daily/month={{month}}/daily.parquet", month_before(SPAN)),
        output:
            month_files(f"{WORK}/measures/month={{month}}/monthly.parquet", SPAN),
        params:
            measures=CONFIG["measures"],
        run:
            stages.measures_span(CONFIG, list(input.daily), input.previous[0] if input.previous else None, list(output))


rule monthly:
    input:
        expand(f"{WORK}/measures/month={{month}}/monthly.parquet", month=MONTHS),
    output:
        f"{WORK}/monthly.parquet",
    run:
        stages.gather_monthly(list(input), output[0])
