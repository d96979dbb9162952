# bars: clean trades -> daily bars; daily: bars + returns across month ends (liqpanel.bars)
if FROM_TRADES:

    rule bars:
        input:
            f"{WORK}/clean/month={{month}}/trades.parquet",
        output:
            f"{WORK}/bars/month={{month}}/bars.parquet",
        run:
            stages.bars_month(input[0], output[0])

    rule daily:
        input:
            bars=f"{WORK}/bars/month={{month}}/bars.parquet",
            previous=previous_partition(f"{WORK}/bars/month={{month}}/bars.parquet"),
        output:
            f"{WORK}/daily/month={{month}}/daily.parquet",
        run:
            stages.daily_month(input.bars, input.previous[0] if input.previous else None, output[0])

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
