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
                shares=[shares_source(CONFIG)["path"]] if shares_source(CONFIG) else [],
                fx=expand_inputs("fx"),
            output:
                month_files(f"{WORK}/daily/month={{month}}/daily.parquet", SPAN),
            params:
                columns=CONFIG["columns"]["adjustments"],
                markets=CONFIG.get("markets"),
            run:
                from liqpanel.bars.daily_job import run_daily

                run_daily(list(input.bars), input.previous[0] if input.previous else None, list(output),
                          inputs=SETTINGS.inputs, market=SETTINGS.market)

else:

    # the daily file is read, checked and audited once; every month partition comes from that one read
    rule daily_from_file:
        input:
            daily=expand_inputs("daily"),
            adjustments=expand_inputs("adjustments"),
            securities=expand_inputs("securities"),
            fx=expand_inputs("fx"),
        output:
            daily=expand(f"{WORK}/daily/month={{month}}/daily.parquet", month=MONTHS),
            audit=f"{WORK}/daily_audit.parquet",
            splits=f"{WORK}/daily_splits.parquet",
        params:
            columns={table: CONFIG["columns"][table] for table in ("daily", "adjustments")},
            formats={table: CONFIG["formats"][table] for table in ("daily", "adjustments")},
            daily=CONFIG["daily"],
            markets=CONFIG.get("markets"),
            sample=CONFIG["sample"],
        run:
            from liqpanel.bars.daily_job import run_daily_file

            run_daily_file(MONTHS, list(output.daily), output.audit, output.splits, inputs=SETTINGS.inputs,
                           sample=SETTINGS.sample, market=SETTINGS.market, daily=SETTINGS.daily)
