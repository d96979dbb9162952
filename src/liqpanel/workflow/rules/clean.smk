# clean + bars: raw trades (and quotes) -> clean tables, audit and daily bars,
# one job per span of months, one partition file per month (liqpanel.clean, liqpanel.bars)
if FROM_TRADES:
    for SPAN in SPANS:

        rule:
            name:
                span_rule("trades", SPAN)
            input:
                trades=expand_inputs("trades"),
                quotes=expand_inputs("quotes"),
                securities=expand_inputs("securities"),
            output:
                trades=month_files(f"{WORK}/clean/month={{month}}/trades.parquet", SPAN),
                quotes=month_files(f"{WORK}/clean/month={{month}}/quotes.parquet", SPAN),
                audit=month_files(f"{WORK}/clean/month={{month}}/audit.parquet", SPAN),
                bars=month_files(f"{WORK}/bars/month={{month}}/bars.parquet", SPAN),
            params:
                months=SPAN,
                clean=CONFIG["clean"],
                bars=CONFIG["bars"],
                market=CONFIG.get("market"),
                markets=CONFIG.get("markets"),
                columns={table: CONFIG["columns"][table] for table in ("trades", "quotes")},
                sample=CONFIG["sample"],
                measures=sorted(CONFIG["measures"]),  # the high-frequency bar columns follow the measures
            run:
                from liqpanel.bars.job import run_bars

                run_bars(
                    params.months, {key: list(output[key]) for key in ("trades", "quotes", "audit", "bars")},
                    inputs=SETTINGS.inputs, sample=SETTINGS.sample, market=SETTINGS.market, clean=SETTINGS.clean,
                    bars=SETTINGS.bars, measures=SETTINGS.measures,
                )

    rule audit:
        input:
            expand(f"{WORK}/clean/month={{month}}/audit.parquet", month=MONTHS),
        output:
            f"{WORK}/audit.parquet",
        run:
            from liqpanel.core.io import gather_parquet

            gather_parquet(list(input), output[0], ["partition", "table", "security", "date"])
