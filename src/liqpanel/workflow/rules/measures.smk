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
                from liqpanel.measures.job import run_measures

                run_measures(list(input.daily), input.previous[0] if input.previous else None, list(output),
                             inputs=SETTINGS.inputs, sample=SETTINGS.sample, market=SETTINGS.market,
                             measures=SETTINGS.measures)

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
                from liqpanel.measures.job import measures_block_rows, run_measures_table

                run_measures_table(list(input.daily), input.previous[0] if input.previous else None, output[0],
                                   inputs=SETTINGS.inputs, sample=SETTINGS.sample, market=SETTINGS.market,
                                   measures=SETTINGS.measures, block_rows=measures_block_rows(SETTINGS.measures))

    MEASURES_FILES = [f"{WORK}/measures/span={SPAN[0]}/monthly.parquet" for SPAN in MEASURES_SPANS]


rule monthly:
    input:
        MEASURES_FILES,
    output:
        f"{WORK}/monthly.parquet",
    run:
        from liqpanel.measures.job import run_monthly

        run_monthly(list(input), output[0])
