"""What several stages' jobs use: the run's market and calendar span, the input check, the truth and factor files, gathering partitions."""

from __future__ import annotations

from datetime import date

import polars as pl

from liqpanel import ingest
from liqpanel.clean import reading as readers
from liqpanel.core.errors import InputError
from liqpanel.core.io import write_parquet
from liqpanel.markets.several import load_markets, several


def _month_start(month: str) -> date:
    """'YYYY-MM' as the first day of the month, the value of a table's ``month`` column."""
    return date.fromisoformat(f"{month}-01")


def check_inputs(config: dict) -> None:
    """What the pre-flight check (``liqpanel.preflight``) leaves to the readers, before any job runs:
    the trade and quote files' columns and types through their reader, a trade file with no data
    rows, the adjustments file read whole, and a daily file with its own returns beside adjustments.

    Raises ConfigError or InputError naming the profile, file or column;
    row-level problems are found later, by the clean stage and the daily file's job.
    """
    market = load_markets(config)
    inputs, columns = config["inputs"], config.get("columns", {})
    for key, spec in (("trades", readers.TRADES_SPEC), ("quotes", readers.QUOTES_SPEC)):
        if inputs.get(key):
            read = readers.read_table(inputs[key], columns.get(key, {}), spec, market["timezone"],
                                      fmt=(config.get("formats") or {}).get(key))
            if key == "trades" and not ingest.collect(read.frame.select("_row").head(1), inputs[key]).height:
                raise InputError("the trade file has a header but no data rows; nothing can be measured",
                                 path=inputs[key])
    if inputs.get("adjustments"):
        _adjustments(config)
    if inputs.get("daily") and inputs.get("adjustments"):
        from liqpanel.bars import daily_file as dailyfile

        layout = ingest.layout_of(config, "daily")
        file = ingest.list_files(layout.path)[0]
        if "ret" in ingest.schema_of(ingest.scan_file(file, layout, 1), file):
            raise ingest.error(layout, dailyfile.ADJUSTED_TWICE, file=file, column="ret")


def _calendar_span(config: dict) -> tuple[date, date]:
    """First and last day of the market calendar a run needs (``markets.sample_span``)."""
    from liqpanel.markets import sample_span

    return sample_span(config["sample"]["start"], config["sample"]["end"])


def _market(config: dict) -> dict:
    """The run's market (one profile or several, ``marketset.load_markets``) with the early closes of each
    calendar-backed profile's calendar over the sample (``markets.for_sample``)."""
    from liqpanel.markets import for_sample

    market, span = load_markets(config), _calendar_span(config)
    if several(market):
        return {**market, "_members": {code: for_sample(m, *span) for code, m in market["_members"].items()}}
    return for_sample(market, *span)


def gather(paths: list[str], out: str, sort: list[str]) -> None:
    frames = [pl.scan_parquet(p) for p in paths]
    write_parquet(pl.concat(frames, how="diagonal_relaxed").sort(sort, nulls_last=True), out)


def read_truth(config: dict) -> pl.DataFrame:
    """The simulator's truth file (security, month, spread and other numbers) through the input contract."""
    return ingest.read_checked(
        ingest.layout_of(config, "truth"), ingest.Spec("truth file", months=("month",), other_numeric=True),
        key=("security", "month"),
    )


def _supplied_factors(config: dict) -> pl.DataFrame | None:
    """The user's factor file (``inputs.factors``) with ``month`` as the first day of the month, or None."""
    if not config["inputs"].get("factors"):
        return None
    return ingest.read_checked(
        ingest.layout_of(config, "factors"), ingest.Spec("factor file", text=(), months=("month",), other_numeric=True),
        key=("month",),
    )


def now() -> str:
    from liqpanel import report as rep

    return rep.now()


def _adjustments(config: dict) -> pl.DataFrame | None:
    if not config["inputs"].get("adjustments"):
        return None
    return readers.read_adjustments(
        config["inputs"]["adjustments"], config["columns"].get("adjustments", {}),
        (config.get("formats") or {}).get("adjustments"),
    )
