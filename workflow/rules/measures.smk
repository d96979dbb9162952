# measures: daily table of one month -> monthly measures (liqpanel.measures)
rule measures:
    input:
        f"{WORK}/daily/month={{month}}/daily.parquet",
    output:
        f"{WORK}/measures/month={{month}}/monthly.parquet",
    params:
        measures=CONFIG["measures"],
    run:
        stages.measures_month(CONFIG, input[0], output[0])


rule monthly:
    input:
        expand(f"{WORK}/measures/month={{month}}/monthly.parquet", month=MONTHS),
    output:
        f"{WORK}/monthly.parquet",
    run:
        stages.gather(list(input), output[0], ["security", "month"])
