"""Several markets in one run: each security on its own market's profile, amounts in one currency.

A run names one market (``market: demo``) or several::

    markets:
      column: exch                      # the user's column of inputs.securities with the market code
      profiles: {HBR: demo, GUL: gullwing}
      reporting_currency: ZZH
    inputs:
      securities: path/to/securities.csv    # security -> market code
      fx: path/to/fx.parquet                 # date, currency, rate

``load_markets`` gives what the stages pass around as "the market": the
profile itself for one market (every helper of ``liqpanel.markets`` as
before), or a market set: a mapping with the member profiles by code and the
security -> code table. The helpers here (``local_clock``, ``session_index``,
``session_bound``) take either; on a set they unroll the handful of markets
into one when/then expression over the frame's ``market`` column, as the
profile's sessions are unrolled, so every security's rows meet their own
market's time zone, sessions and half days with no loop over securities.

Currencies. Each profile names its ``currency``. Dollar volume (and so
Amihud, Amivest and the other measures that divide by it) is converted on
the daily table with the day's rate, Kyle's lambda (per square root of a
currency unit) divided by the rate's square root; market values in the panel
(``markets.market_value``, default ``market_cap``) with the rate of the
month's last day in the FX file on or before the month end; log market
values (``markets.log_market_value``, default ``log_size``) are shifted by
the log of that rate (common practice: the daily rate for a daily flow, the
month-end rate for a month-end stock). A rate is units of the reporting
currency per unit of the market's currency. A market already in the
reporting currency needs no rate.
"""

from __future__ import annotations

from datetime import date

import polars as pl

from liqpanel import ingest
from liqpanel import markets as single
from liqpanel.core.errors import ConfigError, InputError
from liqpanel.core.settings import InputSettings, MarketSettings, SampleSettings

MARKET = "market"  # our column of a security's market code
FX_SPEC = ingest.Spec("FX file", text=("currency",), dates=("date",), numeric=("rate",))
SECURITIES_SPEC = ingest.Spec("securities file", text=("security", MARKET))


def several(market: dict) -> bool:
    """True for a market set (``load_markets`` with ``markets:``), False for one profile."""
    return "_members" in market


def load_markets(config: dict) -> dict:
    """The run's market: the profile of ``market:``, or the set of ``markets:`` with its securities."""
    from liqpanel.config import load_market

    spec = config.get("markets")
    if not spec:
        return load_market(config["market"])
    members = {str(code): load_market(str(name)) for code, name in spec["profiles"].items()}
    zones = {m["timezone"] for m in members.values()}
    ticks = {m.get("tick_size") for m in members.values()}
    return {
        "name": "several markets: " + ", ".join(members),
        # timestamps without a zone: the members' common zone, else UTC (README, "Several markets and currencies")
        "timezone": zones.pop() if len(zones) == 1 else "UTC",
        "tick_size": ticks.pop() if len(ticks) == 1 else None,
        "currency": spec["reporting_currency"],
        "_members": members,
        "_codes": read_securities(config),
    }


def calendar_span(sample: SampleSettings) -> tuple[date, date]:
    """First and last day of the market calendar a run needs (``markets.sample_span``)."""
    return single.sample_span(sample.start, sample.end)


def run_market(market: MarketSettings, inputs: InputSettings, sample: SampleSettings) -> dict:
    """The run's market (one profile or several, ``load_markets``) with the early closes of each
    calendar-backed profile's calendar over the sample (``markets.for_sample``)."""
    loaded, span = load_markets(market.as_config(inputs)), calendar_span(sample)
    if several(loaded):
        return {**loaded, "_members": {code: single.for_sample(m, *span) for code, m in loaded["_members"].items()}}
    return single.for_sample(loaded, *span)


def securities_layout(config: dict) -> ingest.Layout:
    """Where the market codes are: inputs.securities, else the daily file, with the user's mapping and
    ``markets.column`` read as our ``market``."""
    inputs = config["inputs"]
    if not inputs.get("securities") and not inputs.get("daily"):
        raise ConfigError("`markets:` needs `inputs.securities`, a file giving each security's market code "
                          f"in the column `{config['markets']['column']}` (or a daily file with that column)")
    layout = ingest.layout_of(config, "securities" if inputs.get("securities") else "daily")
    column = config["markets"]["column"]
    mapping = {k: v for k, v in layout.mapping.items() if v != MARKET}
    mapping[column] = MARKET
    return ingest.Layout(layout.kind, layout.path, mapping, layout.date_format, layout.time_format, layout.missing,
                         layout.separator)


def read_securities(config: dict, n_rows: int | None = None) -> pl.DataFrame:
    """``security``, ``market``: one row per security, every code one of ``markets.profiles``.

    From inputs.securities (one row per security), else from the daily
    file's column (one code per security on all its rows). A missing or
    unknown code, or a security with two codes, stops the run naming the
    file, the user's column, the data row and the value.
    """
    layout = securities_layout(config)
    frame, files = ingest.read_frame(layout, SECURITIES_SPEC, n_rows=n_rows)
    problem = ingest.first_bad(frame, layout, files, dates=())
    if problem is not None:
        raise problem
    if not frame.height:
        raise InputError("the securities file has a header but no data rows", path=files[0])
    known = [str(c) for c in config["markets"]["profiles"]]
    for column, test in (("security", pl.col("security").is_null()),
                         (MARKET, pl.col(MARKET).is_null() | ~pl.col(MARKET).is_in(known))):
        bad = frame.filter(test).sort("_file", "_row")
        if bad.height:
            first = bad.row(0, named=True)
            what = ("has no security" if column == "security" else
                    f"market code not in `markets.profiles` ({', '.join(known)}); "
                    f"{bad.height} row{'s' if bad.height > 1 else ''} like this")
            raise ingest.error(layout, what, file=files[first["_file"]], column=column, row=first["_row"] + 1,
                               value=first[column])
    if layout.kind == "daily":  # one code per security over all its days
        frame = frame.sort("_file", "_row").unique(["security", MARKET], keep="first", maintain_order=True)
        second = frame.filter(pl.col("security").is_duplicated()).filter(pl.col("security").is_last_distinct())
        if second.height:
            row = second.row(0, named=True)
            codes = frame.filter(pl.col("security") == row["security"]).get_column(MARKET).to_list()
            raise ingest.error(layout, f"security {row['security']!r} has two market codes ({', '.join(codes)}); "
                               "one market per security", file=files[row["_file"]], column=MARKET,
                               row=row["_row"] + 1, value=row[MARKET])
    elif n_rows is None:
        ingest.check_unique(frame, layout, files, ("security",))
    return frame.select("security", MARKET).sort("security")


def attach(frame: pl.LazyFrame, market: dict, *, layout: ingest.Layout | None = None) -> pl.LazyFrame:
    """``frame`` with each security's ``market`` code (a market set), or unchanged (one profile).

    ``layout``: the file the frame was read from (with ``_file`` and
    ``_row``), so a security without a code is an error naming that file,
    its column, row and value; without it the error names the security.
    """
    if not several(market) or MARKET in frame.collect_schema().names():
        return frame
    codes = market["_codes"]
    joined = frame.join(codes.lazy(), on="security", how="left", maintain_order="left")
    orphan = joined.filter(pl.col("security").is_not_null() & pl.col(MARKET).is_null()).select(
        "security", *([pl.col("_file"), pl.col("_row")] if layout is not None else [])
    ).head(1).collect()
    if orphan.height:
        row = orphan.row(0, named=True)
        message = "security not in the securities file (inputs.securities), so its market is unknown"
        if layout is not None:
            files = ingest.list_files(layout.path)
            raise ingest.error(layout, message, file=files[row["_file"]], column="security", row=row["_row"] + 1,
                               value=row["security"])
        raise InputError(f"security {row['security']!r}: {message}")
    return joined


def _by_market(market: dict, build) -> pl.Expr:
    """One expression: ``build(profile)`` on the rows of each member market (null without a code)."""
    out = None
    for code, profile in market["_members"].items():
        out = (pl.when(pl.col(MARKET) == code) if out is None else out.when(pl.col(MARKET) == code)).then(build(profile))
    return out.otherwise(None)


def local_clock(ts: pl.Expr, market: dict, span=None) -> tuple[pl.Expr, pl.Expr]:
    """``liqpanel.markets.local_clock``, each row in its own market's zone on a market set."""
    if not several(market):
        return single.local_clock(ts, market, span)
    return (_by_market(market, lambda p: single.local_clock(ts, p, span)[0]),
            _by_market(market, lambda p: single.local_clock(ts, p, span)[1]))


def session_index(market: dict, local_time: pl.Expr, day: pl.Expr) -> pl.Expr:
    """``liqpanel.markets.session_index``, each row on its own market's sessions and half days."""
    if not several(market):
        return single.session_index(market, local_time, day)
    return _by_market(market, lambda p: single.session_index(p, local_time, day))


def session_bound(market: dict, index: pl.Expr, day: pl.Expr, which: str) -> pl.Expr:
    """``liqpanel.markets.session_bound``, each row on its own market's sessions."""
    if not several(market):
        return single.session_bound(market, index, day, which)
    return _by_market(market, lambda p: single.session_bound(p, index, day, which))


# ---------------------------------------------------------------- currencies


def fx_layout(config: dict) -> ingest.Layout:
    return ingest.layout_of(config, "fx")


def foreign_currencies(config: dict, market: dict) -> dict[str, str]:
    """Market code -> currency, for the members whose currency is not the reporting one."""
    if not several(market):
        return {}
    reporting = config["markets"]["reporting_currency"]
    out = {}
    for code, profile in market["_members"].items():
        currency = profile.get("currency")
        if currency is None:
            raise ConfigError(f"market profile of '{code}' ({profile.get('name')}) names no `currency:`; "
                              "with `markets:` every profile needs one")
        if str(currency) != str(reporting):
            out[code] = str(currency)
    return out


def read_fx(config: dict) -> tuple[pl.DataFrame, ingest.Layout]:
    """The FX file: ``date``, ``currency``, ``rate``; a rate that is not a positive finite number stops
    the run naming file, column, row and value, as does a repeated (date, currency)."""
    layout = fx_layout(config)
    frame, files = ingest.read_frame(layout, FX_SPEC)
    problem = ingest.first_bad(frame, layout, files, dates=("date",))
    if problem is not None:
        raise problem
    bad = frame.filter(pl.col("_nonfinite").is_not_null() | pl.col("rate").is_null() | (pl.col("rate") <= 0)
                       | pl.col("date").is_null() | pl.col("currency").is_null()).sort("_file", "_row")
    if bad.height:
        first = bad.row(0, named=True)
        column = "rate" if first["date"] is not None and first["currency"] is not None else (
            "date" if first["date"] is None else "currency")
        value = first["_value"] if first["_nonfinite"] is not None and first["_value"] is not None else first[column]
        raise ingest.error(layout, "an exchange rate must be a positive finite number, with a date and a currency",
                           file=files[first["_file"]], column=column, row=first["_row"] + 1,
                           value=value if value is not None else (
                               "not finite" if first["_nonfinite"] is not None else "(missing)"))
    ingest.check_unique(frame, layout, files, ("date", "currency"))
    return frame.select("date", "currency", "rate").sort("currency", "date"), layout


def _rates(config: dict, market: dict) -> tuple[pl.DataFrame, dict[str, str], str]:
    foreign = foreign_currencies(config, market)
    if not foreign:
        return pl.DataFrame(schema={"date": pl.Date, "currency": pl.String, "rate": pl.Float64}), foreign, ""
    if not config["inputs"].get("fx"):
        listed = ", ".join(f"{code} ({cur})" for code, cur in foreign.items())
        raise ConfigError(f"markets {listed} are not in the reporting currency "
                          f"{config['markets']['reporting_currency']}; give their rates in `inputs.fx`")
    rates, layout = read_fx(config)
    return rates, foreign, layout.path


def _currency_of(foreign: dict[str, str]) -> pl.Expr:
    return pl.col(MARKET).replace_strict(list(foreign), list(foreign.values()), default=None, return_dtype=pl.String)


def _missing_rate(frame: pl.DataFrame, path: str, what: str) -> None:
    gap = frame.filter(pl.col("_currency").is_not_null() & pl.col("_rate").is_null()).sort("_currency", "date")
    if gap.height:
        first = gap.row(0, named=True)
        raise InputError(f"no exchange rate for {first['_currency']} on {first['date']} ({what}); "
                         f"{gap.select('_currency', 'date').n_unique()} such day(s) in all: add them to the FX file",
                         path=path)


def daily_to_reporting(daily: pl.LazyFrame, config: dict, market: dict) -> pl.LazyFrame:
    """The daily table with ``market``, ``dollar_volume`` and ``kyle_lambda`` in the reporting currency
    (the day's rate).

    One profile: unchanged. A needed rate missing is an error naming the
    currency, the date and the FX file.
    """
    if not several(market):
        return daily
    daily = attach(daily, market)
    rates, foreign, path = _rates(config, market)
    if not foreign:
        return daily
    frame = daily.with_columns(_currency_of(foreign).alias("_currency")).join(
        rates.lazy().rename({"currency": "_currency", "rate": "_rate"}), on=["date", "_currency"], how="left",
        maintain_order="left",
    ).collect()
    _missing_rate(frame.filter(pl.col("dollar_volume").is_not_null()), path, "a trading day's dollar volume")
    rate = pl.when(pl.col("_currency").is_not_null()).then(pl.col("_rate")).otherwise(1.0)
    # Kyle's lambda is a log midpoint change per square root of a currency unit traded (liqpanel.bars.intraday)
    scaled = [(pl.col("kyle_lambda") / rate.sqrt()).alias("kyle_lambda")] if "kyle_lambda" in frame.columns else []
    return frame.lazy().with_columns((pl.col("dollar_volume") * rate).alias("dollar_volume"), *scaled).drop(
        "_currency", "_rate")


def panel_to_reporting(panel: pl.DataFrame, config: dict, market: dict) -> pl.DataFrame:
    """The panel with ``market`` and market values in the reporting currency (month-end rate).

    The month-end rate is the FX file's last rate of the month on or before
    its last day (common practice: a month-end stock at the month-end rate).
    """
    if not several(market):
        return panel
    panel = attach(panel.lazy(), market).collect()
    rates, foreign, path = _rates(config, market)
    spec = config["markets"]
    levels = [c for c in spec.get("market_value", ["market_cap"]) if c in panel.columns]
    logs = [c for c in spec.get("log_market_value", ["log_size"]) if c in panel.columns]
    if not foreign or not (levels or logs):
        return panel.select("security", "month", MARKET, pl.exclude("security", "month", MARKET))
    month_end = rates.with_columns(pl.col("date").dt.truncate("1mo").alias("month")).sort("currency", "date").group_by(
        "currency", "month", maintain_order=True).agg(pl.col("rate").last().alias("_rate"))
    frame = panel.with_columns(_currency_of(foreign).alias("_currency")).join(
        month_end.rename({"currency": "_currency"}), on=["_currency", "month"], how="left", maintain_order="left")
    needed = pl.any_horizontal([pl.col(c).is_not_null() for c in levels + logs])
    _missing_rate(frame.filter(needed).with_columns(pl.col("month").dt.month_end().alias("date")), path,
                  "no rate in that month for its month-end market value")
    foreign_row = pl.col("_currency").is_not_null()
    frame = frame.with_columns(
        *[pl.when(foreign_row).then(pl.col(c) * pl.col("_rate")).otherwise(pl.col(c)).alias(c) for c in levels],
        *[pl.when(foreign_row).then(pl.col(c) + pl.col("_rate").log()).otherwise(pl.col(c)).alias(c) for c in logs],
    ).drop("_currency", "_rate")
    return frame.select("security", "month", MARKET, pl.exclude("security", "month", MARKET))


__all__ = ["MARKET", "attach", "daily_to_reporting", "load_markets", "local_clock", "panel_to_reporting",
           "read_fx", "read_securities", "session_bound", "session_index", "several"]
