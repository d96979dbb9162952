"""What the simulator writes: the market factor's returns, a vendor-style daily file and the demo's tables on disk."""

from __future__ import annotations

import gzip
from pathlib import Path

import polars as pl

from liqpanel.simulate.market import second_market_profile
from liqpanel.simulate.spec import Market


def market_factor_returns(market: Market) -> pl.DataFrame:
    """A factor file of the invented market: ``month``, ``mkt``.

    ``mkt`` is the value-weighted average of the securities' monthly returns,
    weighted by market capitalisation at the end of the previous month, dated
    by the month in which it is earned (the way factor returns are usually
    published). It lets the demo estimate factor alphas. With a second
    market (``market.fx``), every return and weight is first converted into
    the first market's currency at the month-end rates: a return becomes
    (1 + r) x rate_t / rate_t-1 - 1.
    """
    caps = market.characteristics.select(
        "security",
        pl.col("date").dt.truncate("1mo").dt.offset_by("1mo").alias("month"),
        pl.col("market_cap").alias("_weight"),
    )
    returns = market.returns
    if market.fx is not None:
        # the month-end rate of each security's currency (1 for the first market's), this month and the last
        rates = (
            market.characteristics.select("security", "date")
            .join(market.securities.select("security", "market"), on="security", how="left")
            .join(market.fx.select("date", "rate"), on="date", how="left")
            .select(
                "security",
                pl.col("date").dt.truncate("1mo").alias("month"),
                pl.when(pl.col("market") == market.spec.market_codes[0]).then(1.0).otherwise(pl.col("rate"))
                .alias("_rate"),
            )
            .sort("security", "month")
            .with_columns(pl.col("_rate").shift(1).over("security").alias("_previous_rate"))
        )
        returns = returns.join(rates, on=["security", "month"], how="left").select(
            "security", "month", ((1.0 + pl.col("ret")) * pl.col("_rate") / pl.col("_previous_rate") - 1.0).alias("ret")
        )
        caps = caps.join(
            rates.select("security", pl.col("month").dt.offset_by("1mo"), "_rate"), on=["security", "month"]
        ).select("security", "month", pl.col("_weight") * pl.col("_rate"))
    return (
        returns.join(caps, on=["security", "month"], how="inner")
        .drop_nulls(["ret", "_weight"])
        .group_by("month")
        .agg(((pl.col("ret") * pl.col("_weight")).sum() / pl.col("_weight").sum()).alias("mkt"))
        .sort("month")
    )


# A daily file as a data vendor might deliver it: its own column names, CSV,
# gzip-compressed. The mapping to our names is in config/daily_example.yaml.
DAILY_EXAMPLE_COLUMNS = {
    "security": "ticker", "date": "trade_day", "open": "first_px", "high": "top_px", "low": "bottom_px",
    "close": "last_px", "volume": "qty", "dollar_volume": "turnover_ccy", "n_trades": "deals", "ret": "day_return",
}


def daily_example(market: Market, timezone: str | None = None) -> pl.DataFrame:
    """The market's daily bars in a vendor-style layout, for the daily entry point.

    Built from the good trades by :func:`liqpanel.bars.daily_bars`, then
    renamed to the invented vendor names in ``DAILY_EXAMPLE_COLUMNS`` and
    with ``shares_out`` renamed ``shares_outstanding``. With a second market
    each market's days are its own local days (its profile's time zone) and
    the file gains ``listing`` (the security's market code).
    """
    from liqpanel.bars import daily_bars

    tz = timezone or (market.spec.tz if market.spec is not None else "America/New_York")
    trades = market.trades.lazy().filter(pl.col("true_sign") != 0)
    extra, names = [], {**DAILY_EXAMPLE_COLUMNS, "shares_out": "shares_outstanding"}
    if market.fx is None:
        daily = daily_bars(trades, timezone=tz)
    else:
        zones = dict(zip(market.spec.market_codes, (tz, second_market_profile(market.spec)["timezone"])))
        daily = pl.concat([
            daily_bars(trades.join(market.securities.lazy().filter(pl.col("market") == code).select("security"),
                                   on="security", how="semi"), timezone=zone)
            for code, zone in zones.items()
        ])
        extra, names = ["market"], {**names, "market": "listing"}
    daily = daily.join(market.securities.lazy().select("security", "shares_out", *extra), on="security", how="left")
    return (
        daily.select(*DAILY_EXAMPLE_COLUMNS, "shares_out", *extra)
        .rename(names)
        .sort("ticker", "trade_day")
        .collect()
    )


def write_market(market: Market, out_dir: str | Path) -> dict[str, Path]:
    """Write ``<table>.parquet`` for every table of ``market`` into ``out_dir``.

    Bytes are deterministic for the same tables: pyarrow writer, zstd level
    9, one row group per million rows, no timestamps in the metadata. To keep
    the demo small, timestamps use delta encoding and prices byte-stream-split
    encoding (both standard Parquet encodings). Each file is written to a
    temporary name and moved into place. Returns the paths by table name.
    """
    import pyarrow.parquet as pq

    from liqpanel.core.io import atomic_path

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {}
    tables = {**market.tables(), "factors": market_factor_returns(market)}
    for name, frame in tables.items():
        encoding = {c: "BYTE_STREAM_SPLIT" for c in ("price", "bid", "ask") if c in frame.columns}
        if "ts" in frame.columns:
            encoding["ts"] = "DELTA_BINARY_PACKED"
        path = out / f"{name}.parquet"
        with atomic_path(path) as tmp:
            pq.write_table(
                frame.to_arrow(),
                tmp,
                compression="zstd",
                compression_level=9,
                row_group_size=1 << 20,
                use_dictionary=[c for c in frame.columns if c not in encoding],
                column_encoding=encoding or None,
                write_statistics=True,
            )
        paths[name] = path
    path = out / "daily_example.csv.gz"
    with atomic_path(path) as tmp:
        # mtime=0 keeps the gzip header, and so the file, byte-identical
        with open(tmp, "wb") as raw, gzip.GzipFile(filename="", mode="wb", fileobj=raw, mtime=0) as gz:
            gz.write(daily_example(market).write_csv(float_precision=10).encode())
    paths["daily_example"] = path
    return paths
