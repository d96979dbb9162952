# measures: daily table of one month (+ the previous month's last days,
# flagged, for day-pair estimators) -> monthly measures (liqpanel.measures)
rule measures:
    input:
        daily=f"{WORK}/daily/month={{month}}/daily.parquet",
        previous=previous_partition(f"{WORK}/daily/month={{month}}/daily.parquet"),
    output:
        f"{WORK}/measures/month={{month}}/monthly.parquet",
    params:
        measures=CONFIG["measures"],
    run:
        stages.measures_month(
            CONFIG, input.daily, input.previous[0] if input.previous else None, output[0]
        )


rule monthly:
    input:
        expand(f"{WORK}/measures/month={{month}}/monthly.parquet", month=MONTHS),
    output:
        f"{WORK}/monthly.parquet",
    run:
        stages.gather_monthly(list(input), output[0])
