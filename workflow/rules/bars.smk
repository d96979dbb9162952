# bars: clean trades -> daily bars; daily: bars + returns across month ends (liqpanel.bars)
if FROM_TRADES:

    rule bars:
        input:
            f"{WORK}/clean/month={{month}}/trades.parquet",
        output:
            f"{WORK}/bars/month={{month}}/bars.parquet",
        run:
            stages.bars_month(input[0], output[0])

    def _previous_bars(wildcards):
        if wildcards.month == MONTHS[0]:
            return []
        return [f"{WORK}/bars/month={previous_month(wildcards.month)}/bars.parquet"]

    rule daily:
        input:
            bars=f"{WORK}/bars/month={{month}}/bars.parquet",
            previous=_previous_bars,
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
