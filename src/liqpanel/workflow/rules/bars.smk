# bars: clean trades -> daily bars; daily: bars + returns across month ends (liqpanel.bars)
if FROM_TRADES:

    rule bars:
        input:
            trades=f"{WORK}/clean/month={{month}}/trades.parquet",
            quotes=f"{WORK}/clean/month={{month}}/quotes.parquet",
        output:
            f"{WORK}/bars/month={{month}}/bars.parquet",
        params:
            bars=CONFIG["bars"],
            market=CONFIG["market"],
        run:
            stages.bars_month(input.trades, output[0], CONFIG, input.quotes)

    rule daily:
        input:
            bars=f"{WORK}/bars/month={{month}}/bars.parquet",
            previous=previous_partition(f"{WORK}/bars/month={{month}}/bars.parquet"),
            adjustments=expand_inputs("adjustments"),
        output:
            f"{WORK}/daily/month={{month}}/daily.parquet",
        params:
            columns=CONFIG["columns"]["adjustments"],
        run:
            stages.daily_month(input.bars, input.previous[0] if input.previous else None, output[0], CONFIG)

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
