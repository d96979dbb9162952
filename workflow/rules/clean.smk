# clean: raw trades of one month -> clean trades + audit (liqpanel.clean)
if FROM_TRADES:

    rule clean:
        input:
            trades=CONFIG["inputs"]["trades"],
        output:
            trades=f"{WORK}/clean/month={{month}}/trades.parquet",
            audit=f"{WORK}/clean/month={{month}}/audit.parquet",
        params:
            clean=CONFIG["clean"],
            market=CONFIG["market"],
            columns=CONFIG["columns"]["trades"],
            sample=CONFIG["sample"],
        run:
            stages.clean_month(CONFIG, wildcards.month, output.trades, output.audit)

    rule audit:
        input:
            expand(f"{WORK}/clean/month={{month}}/audit.parquet", month=MONTHS),
        output:
            f"{WORK}/audit.parquet",
        run:
            stages.gather(list(input), output[0], ["partition", "security", "date"])
