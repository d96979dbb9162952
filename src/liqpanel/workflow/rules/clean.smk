# clean: raw trades (and quotes) of one month -> clean tables + audit (liqpanel.clean)
if FROM_TRADES:

    rule clean:
        input:
            trades=expand_inputs("trades"),
            quotes=expand_inputs("quotes"),
        output:
            trades=f"{WORK}/clean/month={{month}}/trades.parquet",
            quotes=f"{WORK}/clean/month={{month}}/quotes.parquet",
            audit=f"{WORK}/clean/month={{month}}/audit.parquet",
        params:
            clean=CONFIG["clean"],
            market=CONFIG["market"],
            columns={table: CONFIG["columns"][table] for table in ("trades", "quotes")},
            sample=CONFIG["sample"],
        run:
            stages.clean_month(CONFIG, wildcards.month, output.trades, output.audit, output.quotes)

    rule audit:
        input:
            expand(f"{WORK}/clean/month={{month}}/audit.parquet", month=MONTHS),
        output:
            f"{WORK}/audit.parquet",
        run:
            stages.gather(list(input), output[0], ["partition", "table", "security", "date"])
