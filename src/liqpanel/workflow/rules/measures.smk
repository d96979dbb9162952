# measures: daily table of each month (+ the previous month's last days,
# flagged, for day-pair estimators) -> monthly measures (liqpanel.measures)
if FROM_TRADES:
    # one job per span of months, each month its own partition
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

    MEASURES_FILES = expand(f"{WORK}/measures/month={{month}}/monthly.parquet", month=MONTHS)

else:
    # a daily file's months are small and many: one job for the whole sample (or per
    # run.measures_span_months), its months measured in blocks, one table per job
    for SPAN in MEASURES_SPANS:

        rule:
            name:
                span_rule("measures", SPAN)
            input:
                daily=month_files(f"{WORK}/daily/month={{month}}/daily.parquet", SPAN),
                previous=month_files(f"{WORK}/daily/month={{month}}/daily.parquet", month_before(SPAN)),
            output:
                f"{WORK}/measures/span={SPAN[0]}/monthly.parquet",
            params:
                measures=CONFIG["measures"],
            run:
                stages.measures_table(CONFIG, list(input.daily), input.previous[0] if input.previous else None,
                                      output[0], block_rows=stages.measures_block_rows(CONFIG))

    MEASURES_FILES = [f"{WORK}/measures/span={SPAN[0]}/monthly.parquet" for SPAN in MEASURES_SPANS]


rule monthly:
    input:
        MEASURES_FILES,
    output:
        f"{WORK}/monthly.parquet",
    run:
        stages.gather_monthly(list(input), output[0])
