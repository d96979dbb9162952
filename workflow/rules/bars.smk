# daily: bars + returns across month ends (liqpanel.bars), one job per span of months;
# the first month of a span reads the last bars of the span before
if FROM_TRADES:
    for SPAN in SPANS:

        rule:
            name:
                span_rule("daily", SPAN)
            input:
                bars=month_files(f"{WORK}/bars/month={{month}}/bars.parquet", SPAN),
                previous=month_files(f"{WORK}/bars/month={{month}}/bars.parquet", month_before(SPAN)),
                adjustments=expand_inputs("adjustments"),
            output:
                month_files(f"{WORK}/daily/month={{month}}/daily.parquet", SPAN),
            params:
                columns=CONFIG["columns"]["adjustments"],
            run:
                stages.daily_span(CONFIG, list(input.bars), input.previous[0] if input.previous else None, list(output))

else:

    rule daily_from_file:
        input:
            CONFIG["inputs"]["daily"],
        output:
            f"{WORK}/daily/month={{month}}/daily.parquet",
        params:
            columns=CONFIG["columns"]["daily"],
        run:
            stages.daily_from_file(CONFIG, wildcards.month, output[0])
