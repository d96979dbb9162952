"""Which estimator can be trusted in a given market: a simulation study calibrated to its data.

Every low-frequency spread estimator is biased in a way that depends on the
ratio of the spread to daily volatility, on how often the security trades
and on the window length. This module measures those biases under the
conditions of the user's own market:

1. Calibration (``calibrate``): from the daily table, one row per
   security-month with the window length (the market's trading days in the
   month within the security's listed span), the share of those days
   without a trade, the mean number of trades per day, the daily volatility
   (a range estimator of the library, ``vol_yang_zhang`` by default), the
   mean daily dollar volume, the median close and a spread level: the
   month's high-frequency effective spread when the monthly table has that
   column, else a low-frequency proxy of the library (``edge_spread`` by
   default) taken as the security's median over its months (convention of
   this project: a single month's proxy is too noisy to serve as a level).
   Security-months that cannot be calibrated are dropped by a named rule
   and counted in the audit.
2. Draws (``draw_conditions``): security-months resampled with replacement
   from the calibrated rows, so the study samples the joint distribution of
   spread, volatility, trading intensity and window length as the market
   has it.
3. Simulation (``simulate_draws``): each draw becomes one independent
   security-month of the Roll (1984) model traded intraday by
   ``liqpanel.simulate.simulate_security_months`` (known half-spread c =
   spread / 2, daily efficient volatility, Poisson trades per day), on the
   market's time zone, session and tick size, turned into the daily table by
   ``liqpanel.bars.daily_bars``. One extra business day before the window
   gives its first day a return, as a month inside a longer sample has.
4. Estimation: every registered spread and volatility measure that daily
   bars support (``estimator_selection``), with the options of the user's
   ``measures:`` section where it names the measure, run by
   ``liqpanel.measures.compute_monthly`` exactly as in the workflow.
5. Evaluation (``evaluate``): per estimator, overall and by bins of the true
   spread / volatility ratio and of the true trades per day: mean and median
   bias, bias relative to the mean truth, RMSE, correlation with the truth
   across security-months, the share of missing estimates and, for an
   estimator with an interval (the Gibbs sampler), the share of intervals
   that contain the truth.

Truth. The true spread of a security-month is the mean over its trades of
ln(ask / bid) (equal to 2c without a tick; with a tick the quotes are
rounded outwards, so it is at least 2c). The spread estimators work in log
prices, so their target is this log spread (0.01 = 1% of the price). The
true volatility is the daily standard deviation of the efficient log price;
estimators of the trading hours only (Parkinson, Garman-Klass,
Rogers-Satchell) are compared with sqrt(1 - overnight share) times it.

Assumptions of the study (the simulator's): the Roll model holds (trades at
the bid or the ask with equal probability, independent of a Brownian
efficient price), the spread and volatility are constant within the month,
trades arrive as a Poisson process, there is no market factor. Results are
measured on simulated data under these assumptions; they describe the
estimators, not the market.

Reproducible: one seed drives the draws and the simulation; the Gibbs
sampler keeps its own seed option; outputs are sorted.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date
from typing import Any

import numpy as np
import polars as pl

from liqpanel.bars import daily_bars
from liqpanel.contracts import DAILY, require_columns
from liqpanel.errors import ConfigError
from liqpanel.measures import REGISTRY, compute_monthly, get_measure
from liqpanel.measures.blend import NAME as BLEND
from liqpanel.measures.frames import with_market_settings
from liqpanel.simulate import SECURITY_PREFIX, simulate_security_months

KEY = ["security", "month"]
KINDS = ("spread", "volatility")
# volatility estimators of the trading hours only (see liqpanel.measures.volatility)
TRADING_HOURS = frozenset({"vol_parkinson", "vol_garman_klass", "vol_rogers_satchell"})
# columns of the daily table built from simulated trades
SIMULATED_COLUMNS = frozenset(DAILY) | {"vwap"}
# columns the measures stage adds itself: the market return, and the flag of a previous month's
# last day lent to measures that pair consecutive days
SUPPLIED_COLUMNS = frozenset({"mkt_ret", "from_previous_month"})
SIMULATION_START = "2021-01"  # any month: the calendar is business days, the window is what matters
WINDOW_MONTH = date(2021, 1, 1)  # the label of every draw's window (its "month")
WARM_UP_MONTH = date(2020, 12, 1)  # the label of the warm-up day before it
SIMULATION_PRICE = 50.0  # initial price; only relative to a tick does the price level matter
PRICE_STEP = 1.25  # with a tick, draws are simulated in groups whose prices differ by less than this factor
DEFAULTS: dict[str, Any] = {
    "draws": 2000,
    "seed": 20240601,
    "measures": None,
    "spread_column": "effective_spread",
    "fallback_spread": "edge_spread",
    "volatility": "vol_yang_zhang",
    "min_days": 10,
    "trades_per_day_when_unknown": 50.0,
    "overnight_share": 0.0,
    "bins": 4,
    "spread_vol_edges": None,
    "intensity_edges": None,
    "min_cell": 20,
    "blend_max_missing": 0.05,
}


def settings(study: dict[str, Any] | None) -> dict[str, Any]:
    """The study's settings with defaults filled; unknown keys are refused."""
    study = dict(study or {})
    unknown = sorted(set(study) - set(DEFAULTS) - {"in_report"})
    if unknown:
        raise ConfigError(f"unknown key '{unknown[0]}' under study; allowed keys there: {', '.join(sorted(DEFAULTS))}")
    return {**DEFAULTS, **{k: v for k, v in study.items() if k != "in_report"}}


def check_settings(study: dict[str, Any] | None) -> dict[str, Any]:
    """Check that the measures the study names exist and have the right family."""
    s = settings(study)
    for key, family in (("fallback_spread", "spread"), ("volatility", "volatility")):
        measure = _named_measure(s[key], f"study.{key}")
        if measure.family != family:
            raise ConfigError(f"study.{key}: '{s[key]}' is a measure of the {measure.family} family; "
                              f"expected one of the {family} family")
        missing = sorted(set(measure.columns) - set(DAILY) - SUPPLIED_COLUMNS)
        if missing:
            raise ConfigError(f"study.{key}: '{s[key]}' needs daily column(s) {missing}; choose a measure of daily bars")
    for name in s["measures"] or ():
        measure = _named_measure(name, "study.measures")
        if measure.family not in KINDS:
            raise ConfigError(f"study.measures: '{name}' is a measure of the {measure.family} family; the study "
                              "compares spread and volatility estimators with their truth")
        if not _from_daily_bars(measure):
            raise ConfigError(f"study.measures: '{name}' needs daily column(s) "
                              f"{sorted(set(measure.columns) - SIMULATED_COLUMNS - SUPPLIED_COLUMNS)}, "
                              "which simulated daily bars lack")
    for key in ("spread_vol_edges", "intensity_edges"):
        edges = s[key]
        if edges is not None and (len(edges) < 1 or any(b <= a for a, b in zip(edges, edges[1:]))):
            raise ConfigError(f"study.{key}: expected an increasing list of bin edges, got {edges!r}")
    return s


def _from_daily_bars(measure) -> bool:
    """Whether daily bars built from trades give the measure everything it needs."""
    return set(measure.columns) <= SIMULATED_COLUMNS | SUPPLIED_COLUMNS


def _named_measure(name: str, where: str):
    try:
        return get_measure(name)
    except ConfigError as exc:
        raise ConfigError(f"{where}: {exc}") from None


def estimator_selection(measures: dict[str, Any] | None, names: list[str] | None = None) -> dict[str, Any]:
    """The measures the study runs, with their options.

    By default every registered spread and volatility measure whose daily
    columns simulated daily bars provide (high-frequency benchmarks need
    quotes in the daily table and are left out); ``names`` narrows the list.
    Options come from the user's ``measures:`` section where it names the
    measure, so the study runs the estimators as the workflow does.
    """
    measures = measures or {}
    if names is None:
        names = sorted(n for n, m in REGISTRY.items() if m.family in KINDS and _from_daily_bars(m) and n != BLEND)
    return {name: measures.get(name) for name in names}


# ---------------------------------------------------------------- calibration


def _market_days_in_span(daily: pl.LazyFrame, calendar=None) -> pl.LazyFrame:
    """Per security-month: the market's trading days in the month within the security's listed span.

    A market trading day is an open day of the market's calendar when one is
    given (``liqpanel.markets.trading_days``), else a date on which any
    security has a row; the listed span runs from the security's first to
    its last date in the table.
    """
    if calendar is not None:
        from liqpanel.measures.neighbours import open_day_numbers
        from liqpanel.measures.plan import open_days_listed

        base = (daily.group_by(KEY).agg(pl.col("date").min().alias("_first_date"), pl.col("date").max().alias("_last_date"))
                .sort(KEY).collect(engine="in-memory"))
        return base.select(*KEY, open_days_listed(base, open_day_numbers(calendar)).alias("n_days")).lazy()
    days = daily.select("date", "month").unique().sort("date").with_row_index("_day")
    span = days.group_by("month").agg(pl.col("_day").min().alias("_m_first"), pl.col("_day").max().alias("_m_last"))
    listed = (
        daily.group_by("security")
        .agg(pl.col("date").min().alias("date"), pl.col("date").max().alias("_last"))
        .join(days.select("date", pl.col("_day").alias("_s_first")), on="date", how="left")
        .join(days.select(pl.col("date").alias("_last"), pl.col("_day").alias("_s_last")), on="_last", how="left")
        .select("security", "_s_first", "_s_last")
    )
    n_days = (
        pl.min_horizontal("_s_last", "_m_last").cast(pl.Int64) - pl.max_horizontal("_s_first", "_m_first").cast(pl.Int64) + 1
    )
    return (
        daily.select(KEY).unique()
        .join(span, on="month", how="left")
        .join(listed, on="security", how="left")
        .select(*KEY, n_days.clip(lower_bound=0).alias("n_days"))
    )


def calibrate(
    daily: pl.LazyFrame,
    monthly: pl.DataFrame | None = None,
    *,
    study: dict[str, Any] | None = None,
    measures: dict[str, Any] | None = None,
    calendar=None,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Conditions of every security-month of the user's data, and the audit of the rows left out.

    ``calendar``: the market's open days when its profile has a trading
    calendar (then a holiday is not in the window and an open day without
    a trade counts as one without trades); None infers the days from the data.

    Returns ``(pool, audit)``. ``pool`` has one row per calibrated
    security-month: ``security``, ``month``, ``n_days`` (window length: the
    market's trading days in the month within the security's listed span),
    ``days_traded`` (days with positive volume), ``no_trade_share`` (1 -
    days_traded / n_days), ``trades_per_day`` (trades over the month / n_days
    when the table counts trades; else -ln(no_trade_share), the Poisson rate
    whose chance of a day without a trade is that share; else, for a
    security that traded every day, ``trades_per_day_when_unknown``),
    ``trades_source``, ``daily_vol`` (the ``volatility`` measure, daily log
    units), ``spread`` and ``spread_source``, ``dollar_volume`` (mean per
    traded day, the market's currency), ``price`` (median close).

    Spread: the month's value of the monthly column ``spread_column`` (the
    high-frequency effective spread) when ``monthly`` has that column with
    any value; else the ``fallback_spread`` measure computed from the daily table, as the
    security's median over its calibrated months. ``audit`` counts the
    security-months read, kept and dropped by rule: ``too_few_trading_days``
    (fewer than ``min_days`` days with a trade), ``no_volatility`` (missing
    or zero), ``no_spread`` (missing).
    """
    s = check_settings(study)
    measures = measures or {}
    require_columns(daily, ["security", "date", "month", "high", "low", "close", "volume"], table="daily")
    names = daily.collect_schema().names()
    has_counts = "n_trades" in names
    traded = (pl.col("volume") > 0) & pl.col("close").is_not_null()
    per_month = daily.group_by(KEY).agg(
        traded.sum().cast(pl.Int64).alias("days_traded"),
        pl.col("n_trades").filter(traded).sum().cast(pl.Float64).alias("_trades") if has_counts else pl.lit(None, dtype=pl.Float64).alias("_trades"),
        (pl.col("n_trades").filter(traded).null_count() == 0).alias("_counted") if has_counts else pl.lit(False).alias("_counted"),
        pl.col("dollar_volume").filter(traded).mean().alias("dollar_volume") if "dollar_volume" in names else pl.lit(None, dtype=pl.Float64).alias("dollar_volume"),
        pl.col("close").filter(traded).median().alias("price"),
    )
    selection = {s["volatility"]: {**(measures.get(s["volatility"]) or {}), "min_days": 1}}
    use_column = (monthly is not None and s["spread_column"] in monthly.columns
                  and monthly.get_column(s["spread_column"]).drop_nulls().len() > 0)
    if not use_column:
        selection[s["fallback_spread"]] = {**(measures.get(s["fallback_spread"]) or {}), "min_days": 1}
    estimates = compute_monthly(daily, selection, calendar=calendar)
    vol_out = REGISTRY[s["volatility"]].outputs[0]
    spread_out = s["spread_column"] if use_column else REGISTRY[s["fallback_spread"]].outputs[0]
    if use_column:
        estimates = estimates.join(monthly.select(*KEY, pl.col(spread_out).cast(pl.Float64)), on=KEY, how="left")
    frame = (
        _market_days_in_span(daily, calendar)
        .join(per_month, on=KEY, how="left")
        .collect(engine="in-memory")
        .join(estimates.select(*KEY, pl.col(vol_out).alias("daily_vol"), pl.col(spread_out).alias("_spread")), on=KEY, how="left")
        .sort(KEY)
    )
    n_days = pl.col("n_days").cast(pl.Float64)
    no_trade = (1.0 - pl.col("days_traded") / n_days).clip(0.0, 1.0)
    frame = frame.with_columns(
        pl.col("n_days").clip(lower_bound=pl.col("days_traded")),
        no_trade.alias("no_trade_share"),
    ).with_columns(
        pl.when(pl.col("_counted")).then(pl.col("_trades") / pl.col("n_days"))
        .when(pl.col("no_trade_share") > 0).then(-pl.col("no_trade_share").log())
        .otherwise(pl.lit(float(s["trades_per_day_when_unknown"])))
        .alias("trades_per_day"),
        pl.when(pl.col("_counted")).then(pl.lit("trade counts"))
        .when(pl.col("no_trade_share") > 0).then(pl.lit("days without trades"))
        .otherwise(pl.lit("assumed (study.trades_per_day_when_unknown)"))
        .alias("trades_source"),
    )
    rule = (
        pl.when(pl.col("days_traded") < s["min_days"]).then(pl.lit("too_few_trading_days"))
        .when(pl.col("daily_vol").is_null() | ~(pl.col("daily_vol") > 0)).then(pl.lit("no_volatility"))
        .when(pl.col("_spread").is_null() | pl.col("_spread").is_nan()).then(pl.lit("no_spread"))
        .otherwise(None)
    )
    frame = frame.with_columns(rule.alias("_dropped"))
    if not use_column:
        # the proxy's level: the security's median over its months that pass the rules
        level = frame.filter(pl.col("_dropped").is_null()).group_by("security").agg(pl.col("_spread").median().alias("_level"))
        frame = frame.join(level, on="security", how="left").with_columns(pl.col("_level").alias("_spread"))
    spread_source = (
        f"{spread_out} (monthly column, the month's value)" if use_column
        else f"{spread_out} (security median over its months; no value in the monthly column '{s['spread_column']}')"
    )
    pool = (
        frame.filter(pl.col("_dropped").is_null())
        .select(
            *KEY, "n_days", "days_traded", "no_trade_share", "trades_per_day", "trades_source", "daily_vol",
            pl.col("_spread").clip(lower_bound=0.0).alias("spread"), pl.lit(spread_source).alias("spread_source"),
            "dollar_volume", "price",
        )
        .sort(KEY)
    )
    audit = _calibration_audit(frame)
    return pool, audit


def _calibration_audit(frame: pl.DataFrame) -> pl.DataFrame:
    rules = ("too_few_trading_days", "no_volatility", "no_spread")
    counts = {r: frame.filter(pl.col("_dropped") == r).height for r in rules}
    rows = [("read", frame.height), ("kept", frame.height - sum(counts.values()))]
    rows += [(f"dropped: {r}", counts[r]) for r in rules]
    return pl.DataFrame(
        {"security_months": [r[0] for r in rows], "count": [r[1] for r in rows]}, schema_overrides={"count": pl.Int64}
    )


def describe_conditions(frame: pl.DataFrame) -> pl.DataFrame:
    """Distribution of the calibrated (or drawn) conditions: n, mean and quantiles per variable."""
    variables = {
        "spread (% of price)": pl.col("spread") * 100.0,
        "daily volatility (%)": pl.col("daily_vol") * 100.0,
        "spread / volatility": pl.col("spread") / pl.col("daily_vol"),
        "trades per day": pl.col("trades_per_day"),
        "share of days without trades": pl.col("no_trade_share"),
        "window (trading days)": pl.col("n_days").cast(pl.Float64),
        "dollar volume per traded day": pl.col("dollar_volume"),
    }
    rows = []
    for label, expr in variables.items():
        x = frame.select(expr.alias("x")).get_column("x").drop_nulls().drop_nans()
        rows.append({
            "variable": label, "n": x.len(), "mean": x.mean(),
            **{f"p{int(q * 100):02d}": x.quantile(q, "linear") for q in (0.1, 0.25, 0.5, 0.75, 0.9)},
        })
    return pl.DataFrame(rows, schema_overrides={"n": pl.Int64})


# ---------------------------------------------------------------- draws and simulation


def draw_conditions(pool: pl.DataFrame, draws: int, seed: int) -> pl.DataFrame:
    """``draws`` security-months resampled with replacement from the calibrated ``pool``.

    Keeps the joint distribution of the pool's columns; ``draw`` numbers the
    draws from 0, ``security`` becomes the draw's own identifier (sim-D000001,
    ...) and ``origin_security``, ``origin_month`` say where it came from.
    Needs ``spread``, ``daily_vol``, ``trades_per_day``, ``n_days``.
    """
    require_columns(pool, ["spread", "daily_vol", "trades_per_day", "n_days"], table="study conditions")
    if pool.height == 0:
        raise ConfigError("the study has no security-month to draw from: every one was dropped in calibration "
                          "(see the calibration audit; lower study.min_days?)")
    if draws < 1:
        raise ConfigError(f"study.draws = {draws}: expected a positive number of draws")
    order = [c for c in KEY if c in pool.columns]
    pool = pool.sort(order) if order else pool
    index = np.random.default_rng(np.random.SeedSequence([seed, 0])).integers(0, pool.height, draws)
    drawn = pool[index]
    if "security" in drawn.columns:
        drawn = drawn.rename({"security": "origin_security"})
    if "month" in drawn.columns:
        drawn = drawn.rename({"month": "origin_month"})
    width = max(6, len(str(draws)))
    return drawn.with_columns(
        pl.Series("draw", np.arange(draws, dtype=np.int64)),
        pl.format(SECURITY_PREFIX + "D{}", pl.int_range(1, draws + 1).cast(pl.String).str.zfill(width)).alias("security"),
    )


@dataclass(frozen=True)
class Market:
    """What the simulation needs of the market profile: time zone, one session, tick."""

    timezone: str = "America/New_York"
    session: tuple[str, str] = ("09:10", "15:40")
    tick: float | None = None
    overnight_share: float = 0.0

    @classmethod
    def from_profile(cls, profile: dict[str, Any], overnight_share: float = 0.0) -> "Market":
        """From a market profile: its time zone, its first open to its last close, its tick size.

        A midday break is not simulated (convention of this project): the
        session runs from the first open to the last close. With tick
        regimes the simulator takes the latest (``markets.latest_tick``).
        """
        from liqpanel.markets import latest_tick

        sessions = profile["sessions"]
        tick = latest_tick(profile)
        return cls(
            timezone=profile["timezone"],
            session=(str(sessions[0][0]), str(sessions[-1][1])),
            tick=float(tick) if tick else None,
            overnight_share=float(overnight_share),
        )


def simulate_draws(conditions: pl.DataFrame, market: Market, seed: int) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Simulate every drawn security-month; return its daily table and its truth.

    Each row of ``conditions`` (from ``draw_conditions``) is one security of
    ``simulate_security_months`` with half-spread ``spread / 2``, daily
    volatility ``daily_vol`` and ``trades_per_day``, traded for one warm-up
    business day and then its window of ``n_days`` days (all draws share one
    calendar; a draw's rows after its window are dropped). With a tick the
    relative tick depends on the price, so the draws are simulated in groups
    of similar ``price`` (within a factor ``PRICE_STEP``, each group at its
    median price); without a tick at a single price.

    The daily table follows the daily contract. Every draw's window carries
    the month ``WINDOW_MONTH`` (the window is the month) and its warm-up day
    ``WARM_UP_MONTH``, as the previous month's last day sits in the previous
    month partition of the workflow; estimates are read for the window. The
    truth, over the window, has ``security``,
    ``true_spread`` (mean ln(ask/bid) over the window's trades, 2c when there
    is no tick or no trade), ``true_vol`` (daily), ``true_vol_session``
    (sqrt(1 - overnight share) x daily), ``true_trades_per_day``,
    ``true_no_trade_share`` (realised) and ``days_traded``.
    """
    if conditions.height == 0:
        raise ConfigError("the study has no draws to simulate")
    length = int(conditions.get_column("n_days").max()) + 1
    if market.tick is not None and "price" in conditions.columns:
        price = conditions.get_column("price").fill_null(SIMULATION_PRICE).to_numpy()
        step = np.floor(np.log(np.maximum(price, 1e-12)) / np.log(PRICE_STEP))
        groups = np.unique(step, return_inverse=True)[1].astype(np.int64)
    else:
        price = np.full(conditions.height, SIMULATION_PRICE)
        groups = np.zeros(conditions.height, dtype=np.int64)
    spread = conditions.get_column("spread").to_numpy()
    vol = conditions.get_column("daily_vol").to_numpy()
    lam = conditions.get_column("trades_per_day").to_numpy()
    ids = conditions.get_column("security").to_numpy()
    seeds = np.random.SeedSequence([seed, 1]).spawn(int(groups.max()) + 1)
    trades, quotes = [], []
    for g in np.unique(groups):  # one simulation per price group (one group without a tick)
        members = np.flatnonzero(groups == g)
        sim = simulate_security_months(
            spread[members] / 2.0, vol[members], lam[members], n_days=length,
            seed=int(seeds[g].generate_state(1)[0]), tick=market.tick, tz=market.timezone, session=market.session,
            start=SIMULATION_START, price=float(np.median(price[members])), overnight_share=market.overnight_share,
        )
        rename = pl.DataFrame({"_sim": sim.securities.get_column("security"), "_draw": ids[members]})
        for table, out in ((sim.trades, trades), (sim.quotes, quotes)):
            out.append(table.join(rename, left_on="security", right_on="_sim", how="left")
                       .drop("security").rename({"_draw": "security"}))
    calendar = _calendar(length)
    window = conditions.select("security", "n_days")
    daily = (
        daily_bars(pl.concat(trades).lazy(), timezone=market.timezone)
        .join(calendar.lazy(), on="date", how="left")
        .join(window.lazy(), on="security", how="left")
        .filter(pl.col("_day") <= pl.col("n_days"))
        .with_columns(pl.when(pl.col("_day") == 0).then(pl.lit(WARM_UP_MONTH)).otherwise(pl.lit(WINDOW_MONTH)).alias("month"))
        .select(*DAILY)
        .sort("security", "date")
        .collect(engine="in-memory")
    )
    truth = _truth(conditions, daily, pl.concat(quotes), calendar, market)
    return daily, truth


def _calendar(length: int) -> pl.DataFrame:
    first = np.datetime64(SIMULATION_START, "M").astype("datetime64[D]")
    days = np.busday_offset(first, np.arange(length), roll="forward")
    return pl.DataFrame({"date": days, "_day": np.arange(length, dtype=np.int64)}).with_columns(pl.col("date").cast(pl.Date))


def _truth(conditions: pl.DataFrame, daily: pl.DataFrame, quotes: pl.DataFrame, calendar: pl.DataFrame,
           market: Market) -> pl.DataFrame:
    traded = daily.filter(pl.col("month") == WINDOW_MONTH).group_by("security").agg(
        pl.len().cast(pl.Int64).alias("days_traded"))
    truth = (
        conditions.select(
            "security", "draw", "n_days",
            (pl.col("spread") / 2.0).alias("_half"),
            pl.col("daily_vol").alias("true_vol"),
            (pl.col("daily_vol") * math.sqrt(1.0 - market.overnight_share)).alias("true_vol_session"),
            pl.col("trades_per_day").alias("true_trades_per_day"),
        )
        .join(traded, on="security", how="left")
        .with_columns(pl.col("days_traded").fill_null(0))
    )
    if market.tick is None:
        spread = pl.col("_half") * 2.0
    else:
        in_window = (
            quotes.lazy()
            .with_columns(pl.col("ts").dt.convert_time_zone(market.timezone).dt.date().alias("date"))
            .join(calendar.lazy(), on="date", how="left")
            .join(truth.lazy().select("security", "n_days"), on="security", how="left")
            .filter((pl.col("_day") >= 1) & (pl.col("_day") <= pl.col("n_days")))
            .group_by("security")
            .agg((pl.col("ask") / pl.col("bid")).log().mean().alias("_quoted"))
            .collect(engine="in-memory")
        )
        truth = truth.join(in_window, on="security", how="left")
        spread = pl.coalesce(pl.col("_quoted"), pl.col("_half") * 2.0)
    return truth.select(
        "security", "draw", "n_days",
        spread.alias("true_spread"),
        "true_vol", "true_vol_session", "true_trades_per_day",
        (1.0 - pl.col("days_traded") / pl.col("n_days")).alias("true_no_trade_share"),
        "days_traded",
    ).sort("security")


# ---------------------------------------------------------------- evaluation


@dataclass(frozen=True)
class Estimate:
    """One column of estimates and the truth it targets."""

    name: str  # the label in the tables
    kind: str  # "spread" or "volatility"
    value: pl.Expr
    truth: str  # column of the truth table
    lower: pl.Expr | None = None
    upper: pl.Expr | None = None


def estimates_of(selection: dict[str, Any]) -> list[Estimate]:
    """The estimates compared with the truth for a selection of measures.

    A spread measure's first output against ``true_spread``; a volatility
    measure's output against ``true_vol`` (or ``true_vol_session`` for the
    trading-hours estimators); the Gibbs sampler's interval for coverage and
    its sigma_u, and the Roll-implied sigma_u = sqrt(gamma0 + 2 gamma1)
    (missing when negative), against ``true_vol``.
    """
    out = []
    for name in selection:
        m = REGISTRY[name]
        first = m.outputs[0]
        if m.family == "spread":
            lo, hi = f"{first}_lo", f"{first}_hi"
            has_interval = lo in m.outputs and hi in m.outputs
            out.append(Estimate(first, "spread", pl.col(first), "true_spread",
                                pl.col(lo) if has_interval else None, pl.col(hi) if has_interval else None))
        elif m.family == "volatility":
            out.append(Estimate(first, "volatility", pl.col(first), "true_vol_session" if name in TRADING_HOURS else "true_vol"))
    if "gibbs_spread" in selection:
        out.append(Estimate("gibbs_sigma_u", "volatility", pl.col("gibbs_sigma_u"), "true_vol"))
    if "roll_spread" in selection:
        var = pl.col("roll_efficient_var")
        out.append(Estimate("roll_sigma_u", "volatility", pl.when(var >= 0).then(var.sqrt()), "true_vol"))
    return out


def _bin_edges(values: np.ndarray, count: int, edges: list[float] | None) -> np.ndarray:
    """Inner edges: the given ones, or the quantiles that split ``values`` into ``count`` bins."""
    if edges is not None:
        return np.asarray(edges, dtype=float)
    values = values[np.isfinite(values)]
    if count <= 1 or values.size == 0:
        return np.array([])
    edges = np.unique(np.quantile(values, np.arange(1, count) / count))
    return edges[edges > values.min()]  # an edge at the minimum would leave its lower bin empty


def _label(edges: np.ndarray) -> list[str]:
    """Bin labels with the fewest significant digits (at least 2) that keep the edges apart."""
    digits = next((d for d in range(2, 7) if len({f"{x:.{d}g}" for x in edges}) == len(edges)), 7)

    def fmt(x: float) -> str:
        return f"{x:.{digits}g}" if abs(x) < 10 ** digits else f"{x:.0f}"

    bounds = [None, *edges.tolist(), None]
    return [
        f"below {fmt(hi)}" if lo is None and hi is not None
        else f"{fmt(lo)} and above" if hi is None and lo is not None
        else "all" if lo is None
        else f"{fmt(lo)} to {fmt(hi)}"
        for lo, hi in zip(bounds[:-1], bounds[1:])
    ]


def add_bins(truth: pl.DataFrame, study: dict[str, Any] | None = None) -> pl.DataFrame:
    """Add the bins of the true spread / volatility ratio and of the true trades per day.

    Bins are quantiles of the draws (``bins`` of them) unless
    ``spread_vol_edges`` / ``intensity_edges`` give the inner edges; a value
    on an edge goes to the upper bin ("a to b" is the interval [a, b)). Adds
    ``spread_vol``, ``spread_vol_bin`` (0, 1, ...), ``spread_vol_range``
    (label), ``intensity_bin`` and ``intensity_range``.
    """
    s = settings(study)
    ratio = (truth.get_column("true_spread") / truth.get_column("true_vol")).to_numpy()
    lam = truth.get_column("true_trades_per_day").to_numpy()
    out = truth.with_columns(pl.Series("spread_vol", ratio))
    for prefix, values, edges in (
        ("spread_vol", ratio, _bin_edges(ratio, s["bins"], s["spread_vol_edges"])),
        ("intensity", lam, _bin_edges(lam, s["bins"], s["intensity_edges"])),
    ):
        index = np.searchsorted(edges, values, side="right").astype(np.int64)
        labels = _label(edges)
        out = out.with_columns(
            pl.Series(f"{prefix}_bin", index),
            pl.Series(f"{prefix}_range", [labels[i] for i in index], dtype=pl.String),
        )
    return out


def long_estimates(monthly: pl.DataFrame, truth: pl.DataFrame, estimates: list[Estimate]) -> pl.DataFrame:
    """One row per draw and estimator: estimate, truth, interval, error and the draw's bins."""
    joined = truth.join(monthly, on="security", how="left")
    keep = ["security", "draw", "spread_vol", "spread_vol_bin", "spread_vol_range", "intensity_bin", "intensity_range"]
    frames = [
        joined.select(
            *keep,
            pl.lit(e.name).alias("estimator"),
            pl.lit(e.kind).alias("kind"),
            e.value.cast(pl.Float64).alias("estimate"),
            pl.col(e.truth).alias("truth"),
            (e.lower if e.lower is not None else pl.lit(None)).cast(pl.Float64).alias("lower"),
            (e.upper if e.upper is not None else pl.lit(None)).cast(pl.Float64).alias("upper"),
        )
        for e in estimates
    ]
    order = {e.name: i for i, e in enumerate(estimates)}
    return (
        pl.concat(frames)
        .with_columns(
            pl.when(pl.col("estimate").is_nan()).then(None).otherwise(pl.col("estimate")).alias("estimate"),
            pl.col("estimator").replace_strict(order, return_dtype=pl.Int64).alias("_order"),
        )
        .with_columns((pl.col("estimate") - pl.col("truth")).alias("error"))
        .sort("_order", "draw")
        .drop("_order")
    )


def _statistics() -> list[pl.Expr]:
    has = pl.col("estimate").is_not_null()
    truth = pl.col("truth").filter(has)
    err = pl.col("error").drop_nulls()
    interval = pl.col("lower").is_not_null() & pl.col("upper").is_not_null() & has
    inside = ((pl.col("truth") >= pl.col("lower")) & (pl.col("truth") <= pl.col("upper"))).filter(interval)
    return [
        pl.len().cast(pl.Int64).alias("n"),
        has.sum().cast(pl.Int64).alias("n_estimates"),
        (1.0 - has.sum() / pl.len()).alias("missing_share"),
        truth.mean().alias("mean_truth"),
        pl.col("estimate").mean().alias("mean_estimate"),
        err.mean().alias("mean_bias"),
        err.median().alias("median_bias"),
        (err.mean() / truth.mean()).alias("relative_bias"),
        (err.pow(2).mean()).sqrt().alias("rmse"),
        pl.when(has.sum() > 2).then(pl.corr(pl.col("estimate").filter(has), truth)).alias("correlation"),
        pl.when(interval.sum() > 0).then(inside.cast(pl.Float64).mean()).alias("coverage"),
    ]


def summarise(long: pl.DataFrame, by: list[str] | None = None) -> pl.DataFrame:
    """The statistics of every estimator, overall or by the columns in ``by``.

    ``mean_bias`` and ``median_bias`` of estimate - truth over the
    security-months with an estimate; ``relative_bias`` = mean bias / mean
    truth of those months; ``rmse``; ``correlation`` (Pearson) of estimate and
    truth across them; ``missing_share`` of all drawn months; ``coverage``,
    where the estimator has an interval, the share of its intervals that
    contain the truth. Units: those of the estimator (proportions).
    """
    by = by or []
    order = long.select("estimator").unique(maintain_order=True).with_row_index("_order")
    return (
        long.group_by("estimator", "kind", *by)
        .agg(_statistics())
        .join(order, on="estimator", how="left")
        .sort("_order", *by)
        .drop("_order")
    )


def ranking(overall: pl.DataFrame, kind: str) -> pl.DataFrame:
    """The estimators of one kind ranked by RMSE (lowest first; none estimated last)."""
    return (
        overall.filter(pl.col("kind") == kind)
        .sort(pl.col("rmse").is_null(), "rmse", "estimator")
        .with_row_index("rank", offset=1)
        .select(pl.col("rank").cast(pl.Int64), "estimator", "rmse", "mean_bias", "relative_bias", "correlation",
                "missing_share", "n_estimates")
    )


# ---------------------------------------------------------------- the calibrated blend


@dataclass(frozen=True)
class Blend:
    """The blend of spread estimators the study proposes: its weights and its out-of-sample comparison."""

    weights: dict[str, float]
    table: pl.DataFrame  # estimator, weight, rmse_fit, rmse_out_of_sample, mean_bias_out_of_sample, n_fit, n_scored


def blend_weights(estimates: np.ndarray, truth: np.ndarray) -> np.ndarray:
    """Non-negative weights summing to one that minimise sum (estimates @ w - truth)^2.

    Non-negative least squares (``scipy.optimize.nnls``) on the rows
    augmented with the constraint row penalty x (1, ..., 1) = penalty, which
    holds the sum at one to about 1e-9 of the scale; the weights are then
    divided by their sum.
    """
    from scipy.optimize import nnls

    scale = max(float(np.sqrt(np.mean(truth**2))), 1e-12)
    penalty = 1e6 * scale * np.sqrt(len(truth))
    design = np.vstack([estimates, np.full((1, estimates.shape[1]), penalty)])
    target = np.append(truth, penalty)
    weights, _ = nnls(design, target, maxiter=50 * estimates.shape[1])
    return weights / weights.sum() if weights.sum() > 0 else np.full(estimates.shape[1], 1.0 / estimates.shape[1])


def fit_blend(long: pl.DataFrame, overall: pl.DataFrame, max_missing: float) -> Blend | None:
    """Weights of the spread estimators that minimise the simulated RMSE, fitted on half the draws, scored on the other.

    Components: the spread estimators missing in at most ``max_missing`` of
    the draws. Draws with every component present; even draw numbers fit
    the weights (``blend_weights``), odd ones score them: the RMSE of the
    blend and of each component over the same scored draws. None when fewer
    than two estimators qualify or a half is empty. A measurement on data
    simulated under the Roll model with the market's calibrated conditions,
    not a published method.
    """
    eligible = (overall.filter((pl.col("kind") == "spread") & (pl.col("missing_share") <= max_missing)
                               & pl.col("rmse").is_not_null())
                .get_column("estimator").to_list())
    if len(eligible) < 2:
        return None
    wide = (long.filter(pl.col("estimator").is_in(eligible))
            .pivot(on="estimator", index=["draw", "truth"], values="estimate")
            .drop_nulls().sort("draw"))
    fit_rows, score_rows = wide.filter(pl.col("draw") % 2 == 0), wide.filter(pl.col("draw") % 2 == 1)
    if fit_rows.height == 0 or score_rows.height == 0:
        return None
    weights = blend_weights(fit_rows.select(eligible).to_numpy(), fit_rows.get_column("truth").to_numpy())

    def errors(rows: pl.DataFrame, column: np.ndarray) -> tuple[float, float]:
        e = column - rows.get_column("truth").to_numpy()
        return float(np.sqrt(np.mean(e**2))), float(np.mean(e))

    columns = {name: (fit_rows.get_column(name).to_numpy(), score_rows.get_column(name).to_numpy()) for name in eligible}
    columns[BLEND] = (fit_rows.select(eligible).to_numpy() @ weights, score_rows.select(eligible).to_numpy() @ weights)
    rows = []
    for name, (fitted, scored) in columns.items():
        rmse_fit, _ = errors(fit_rows, fitted)
        rmse_out, bias_out = errors(score_rows, scored)
        rows.append({"estimator": name, "weight": 1.0 if name == BLEND else float(weights[eligible.index(name)]),
                     "rmse_fit": rmse_fit, "rmse_out_of_sample": rmse_out, "mean_bias_out_of_sample": bias_out,
                     "n_fit": fit_rows.height, "n_scored": score_rows.height})
    table = pl.DataFrame(rows, schema_overrides={"n_fit": pl.Int64, "n_scored": pl.Int64})
    return Blend(weights={n: float(w) for n, w in zip(eligible, weights)}, table=table)


# ---------------------------------------------------------------- the whole study


@dataclass
class StudyResult:
    """Everything the study measured.

    ``long``: one row per draw and estimator; ``overall``, ``by_spread_vol``,
    ``by_intensity``, ``by_cell``: the statistics overall and by bins;
    ``truth``: the simulated security-months with their bins; ``conditions``:
    the draws; ``settings``: the settings as run; ``info``: counts for the
    summary; ``blend``: the proposed blend of spread estimators (``fit_blend``).
    """

    long: pl.DataFrame
    overall: pl.DataFrame
    by_spread_vol: pl.DataFrame
    by_intensity: pl.DataFrame
    by_cell: pl.DataFrame
    truth: pl.DataFrame
    conditions: pl.DataFrame
    settings: dict[str, Any]
    info: dict[str, Any] = field(default_factory=dict)
    blend: Blend | None = None


def run_study(
    pool: pl.DataFrame,
    *,
    study: dict[str, Any] | None = None,
    measures: dict[str, Any] | None = None,
    market: Market | None = None,
) -> StudyResult:
    """Draw, simulate, estimate and evaluate (steps 2-5 of the module docstring).

    ``pool``: calibrated security-months (from ``calibrate``, or any frame
    with ``spread``, ``daily_vol``, ``trades_per_day``, ``n_days`` and
    optionally ``price``). ``study``: the settings (``DEFAULTS``);
    ``measures``: the user's ``measures:`` section, whose options the study
    uses; ``market``: time zone, session, tick (``Market()``, the simulator's
    default market, when not given; its overnight share is taken from the
    settings).
    """
    s = check_settings(study)
    market = market or Market()
    market = Market(market.timezone, tuple(market.session), market.tick, float(s["overnight_share"]))
    selection = with_market_settings(estimator_selection(measures, s["measures"]), market.tick)
    conditions = draw_conditions(pool, s["draws"], s["seed"])
    daily, truth = simulate_draws(conditions, market, s["seed"])
    monthly = compute_monthly(daily.lazy(), selection).filter(pl.col("month") == WINDOW_MONTH).drop("month")
    truth = add_bins(truth, s)
    long = long_estimates(monthly, truth, estimates_of(selection))
    info = {
        "draws": conditions.height,
        "pool": pool.height,
        "securities": pool.get_column("security").n_unique() if "security" in pool.columns else None,
        "months": (pool.get_column("month").min(), pool.get_column("month").max()) if "month" in pool.columns else None,
        "median_window": float(conditions.get_column("n_days").median()),
        "spread_source": pool.get_column("spread_source")[0] if "spread_source" in pool.columns and pool.height else None,
        "trades_source": _shares(pool, "trades_source"),
        "market": market,
    }
    overall = summarise(long)
    return StudyResult(
        long=long,
        overall=overall,
        blend=fit_blend(long, overall, float(s["blend_max_missing"])),
        by_spread_vol=summarise(long, ["spread_vol_bin", "spread_vol_range"]),
        by_intensity=summarise(long, ["intensity_bin", "intensity_range"]),
        by_cell=summarise(long, ["spread_vol_bin", "spread_vol_range", "intensity_bin", "intensity_range"]),
        truth=truth,
        conditions=conditions,
        settings=s,
        info=info,
    )


def _shares(frame: pl.DataFrame, column: str) -> dict[str, float] | None:
    if column not in frame.columns or frame.height == 0:
        return None
    counts = frame.group_by(column).len().sort(column)
    return {row[0]: row[1] / frame.height for row in counts.iter_rows()}


def summary_text(result: StudyResult) -> str:
    """A short ranked summary of the measured results, with the sample sizes."""
    s, info = result.settings, result.info
    lines = ["# Which estimator is closest to the truth in conditions like this market's?", ""]
    origin = f"{info['pool']} calibrated security-months"
    if info.get("securities") is not None:
        origin += f" of {info['securities']} securities"
    if info.get("months"):
        first, last = info["months"]
        origin += f" ({first:%Y-%m} to {last:%Y-%m})"
    lines.append(
        f"Measured on {info['draws']} simulated security-months (seed {s['seed']}) drawn with replacement from "
        f"{origin}; window: the month (median {info['median_window']:.0f} trading days)."
    )
    details = []
    if info.get("spread_source"):
        details.append(f"spread level from {info['spread_source']}")
    details.append(f"daily volatility from {s['volatility']}" if info.get("spread_source") else "conditions as given")
    if info.get("trades_source"):
        details.append("trades per day from " + ", ".join(f"{k} ({v:.0%})" for k, v in info["trades_source"].items()))
    market = info["market"]
    details.append(f"tick {market.tick if market.tick else 'none'}, overnight share of variance {market.overnight_share:g}")
    lines += ["Calibration: " + "; ".join(details) + ".", ""]
    for kind, unit in (("spread", "percent of the price"), ("volatility", "percent per day")):
        ranked = ranking(result.overall, kind)
        if ranked.height == 0:
            continue
        lines.append(f"{kind.capitalize()} estimators ranked by RMSE ({unit}; over the months each one estimates):")
        lines.append("")
        for row in ranked.iter_rows(named=True):
            if row["rmse"] is None:
                lines.append(f"{row['rank']}. {row['estimator']}: no estimate in {info['draws']} months")
                continue
            lines.append(
                f"{row['rank']}. {row['estimator']}: RMSE {row['rmse'] * 100:.3f}, mean bias {row['mean_bias'] * 100:+.3f} "
                f"({row['relative_bias']:+.0%} of the truth), correlation with the truth "
                f"{_fmt(row['correlation'])}, missing {row['missing_share']:.1%} (n = {row['n_estimates']})"
            )
        lines.append("")
    spread_rank = ranking(result.overall, "spread").drop_nulls("rmse")
    vol_rank = ranking(result.overall, "volatility").drop_nulls("rmse")
    best = []
    if spread_rank.height:
        best.append(f"among spread estimators {spread_rank.item(0, 'estimator')} (RMSE {spread_rank.item(0, 'rmse') * 100:.3f}% of the price)")
    if vol_rank.height:
        best.append(f"among volatility estimators {vol_rank.item(0, 'estimator')} (RMSE {vol_rank.item(0, 'rmse') * 100:.3f}% per day)")
    if best:
        lines += [f"In this market's simulated conditions, lowest RMSE: {'; '.join(best)}.", ""]
    if spread_rank.height:
        least = spread_rank.sort(pl.col("mean_bias").abs(), "estimator").row(0, named=True)
        closest = spread_rank.drop_nulls("correlation").sort("correlation", "estimator", descending=[True, False])
        line = f"Among spread estimators, smallest mean bias: {least['estimator']} ({least['relative_bias']:+.0%} of the truth)"
        if closest.height:
            line += (f"; highest correlation with the true spread across security-months: "
                     f"{closest.item(0, 'estimator')} ({closest.item(0, 'correlation'):.2f})")
        lines += [line + ".", ""]
    if result.blend is not None:
        table = result.blend.table
        blend_row = table.filter(pl.col("estimator") == BLEND).row(0, named=True)
        best_single = table.filter(pl.col("estimator") != BLEND).sort("rmse_out_of_sample").row(0, named=True)
        weights = ", ".join(f"{n}: {w:.3f}" for n, w in result.blend.weights.items() if w > 0)
        lines += [
            f"Calibrated blend of the spread estimators (weights fitted on {blend_row['n_fit']} draws, scored on "
            f"{blend_row['n_scored']} others): {weights}. Out-of-sample RMSE {blend_row['rmse_out_of_sample'] * 100:.3f} "
            f"against {best_single['rmse_out_of_sample'] * 100:.3f} for the best single estimator "
            f"({best_single['estimator']}) on the same draws. Select it in a later run with "
            f"`measures: {BLEND}: {{weights: {{...}}}}` (table study_blend); it is a measurement on simulated data "
            "under the model's assumptions, not a published method.",
            "",
        ]
    covered = result.overall.filter(pl.col("coverage").is_not_null())
    for row in covered.iter_rows(named=True):
        lines.append(f"Coverage of the {row['estimator']} interval: {row['coverage']:.1%} of {row['n_estimates']} months "
                     "contain the true spread.")
    lines += [
        "",
        "These are measurements on the simulated Roll model under the calibrated conditions (spread, volatility, "
        "trading intensity and window drawn from this market), with the sample sizes stated; they are not advice. "
        "Bins and heat maps: tables study_by_spread_vol, study_by_intensity, study_by_cell and figures study_bias_spread, study_bias_volatility.",
    ]
    return "\n".join(lines) + "\n"


@dataclass(frozen=True)
class StudyTable:
    name: str
    frame: pl.DataFrame
    caption: str
    notes: str = ""


def result_tables(result: StudyResult, pool: pl.DataFrame | None = None, audit: pl.DataFrame | None = None) -> list[StudyTable]:
    """The study's tables for the report, each with its caption and note."""
    n = result.info["draws"]
    units = ("Spreads and volatilities are proportions (0.01 = 1% of the price; volatility per day); bias = "
             "estimate - truth over the months with an estimate; relative_bias = mean bias / mean truth; coverage: "
             "share of intervals containing the true spread.")
    bins = (f"Bins of the true spread / daily volatility (spread_vol) and of the true trades per day (intensity): "
            f"{'given edges' if result.settings['spread_vol_edges'] or result.settings['intensity_edges'] else 'quantiles of the draws'}.")
    where = f"{n} security-months simulated from the Roll model with conditions drawn from this market (seed {result.settings['seed']})."
    tables = [
        StudyTable("study_estimators", result.overall, "Estimators against the simulated truth, all drawn security-months",
                   f"{where} {units}"),
        StudyTable(
            "study_ranking",
            pl.concat([ranking(result.overall, kind).select(pl.lit(kind).alias("kind"), pl.all()) for kind in KINDS]),
            "Estimators ranked by RMSE within spread and volatility estimators",
            f"{where} RMSE over the months each estimator estimates; missing_share beside it. {units}",
        ),
        StudyTable("study_by_spread_vol", result.by_spread_vol, "Estimators against the truth by bins of spread / volatility",
                   f"{where} {bins} {units}"),
        StudyTable("study_by_intensity", result.by_intensity, "Estimators against the truth by bins of trades per day",
                   f"{where} {bins} {units}"),
        StudyTable("study_by_cell", result.by_cell, "Estimators against the truth by spread / volatility and trades per day",
                   f"{where} {bins} {units}"),
    ]
    if result.blend is not None:
        tables.append(StudyTable(
            "study_blend", result.blend.table,
            "A calibrated blend of the spread estimators: weights and out-of-sample RMSE beside each estimator",
            f"{where} Non-negative weights summing to one, minimising the RMSE against the true spread on the even "
            "draws with every component estimated (components: spread estimators missing in at most "
            f"{result.settings['blend_max_missing']:.0%} of the draws); RMSE and bias scored on the odd draws. A "
            f"measurement on simulated data under the model's assumptions; select it with `measures: {BLEND}`. {units}",
        ))
    if pool is not None and "spread" in pool.columns:
        tables.append(StudyTable(
            "study_calibration", describe_conditions(pool), "Calibrated conditions of this market: distribution over security-months",
            f"The draws resample these security-months whole, keeping their joint distribution. "
            f"Spread: {result.info.get('spread_source')}; volatility: {result.settings['volatility']}.",
        ))
    if audit is not None:
        tables.append(StudyTable("study_calibration_audit", audit, "Calibration: security-months read, kept and dropped by rule",
                                 f"A security-month needs at least {result.settings['min_days']} days with a trade "
                                 "(study.min_days), a positive volatility and a spread level."))
    return tables


def unestimated(by_cell: pl.DataFrame, kind: str) -> list[str]:
    """Estimators of ``kind`` without a single estimate in any cell (an effective tick in a market without a tick)."""
    counts = by_cell.filter(pl.col("kind") == kind).group_by("estimator", maintain_order=True).agg(pl.col("n_estimates").sum())
    return counts.filter(pl.col("n_estimates") == 0).get_column("estimator").to_list()


def bias_maps(
    by_cell: pl.DataFrame, out_dir, rid: str, *, min_cell: int = 20, limit: float = 100.0, labels: dict | None = None,
) -> list:
    """Heat maps of the mean bias in percent of the mean truth by (spread / volatility, trades per day) bin.

    One figure per kind (``study_bias_spread``, ``study_bias_volatility``,
    PNG and PDF in ``out_dir``), one panel per estimator titled with its
    name in print (``labels``, as in the tables), all on the same colour
    scale (+-``limit`` percent). A cell shows the bias and its number of
    estimates; one with fewer than ``min_cell`` estimates stays blank. An
    estimator without a single estimate has no panel (see ``unestimated``).
    """
    from pathlib import Path

    from liqpanel import figures

    cols = by_cell.select("spread_vol_bin", "spread_vol_range").unique().sort("spread_vol_bin")
    rows = by_cell.select("intensity_bin", "intensity_range").unique().sort("intensity_bin")
    col_index = {b: j for j, b in enumerate(cols.get_column("spread_vol_bin"))}
    row_index = {b: i for i, b in enumerate(rows.get_column("intensity_bin"))}
    paths = []
    for kind in KINDS:
        panels = {}
        skip = set(unestimated(by_cell, kind))
        for (name,), frame in by_cell.filter(pl.col("kind") == kind).group_by("estimator", maintain_order=True):
            if name in skip:
                continue
            values = [[None] * cols.height for _ in range(rows.height)]
            notes = [[""] * cols.height for _ in range(rows.height)]
            for r in frame.iter_rows(named=True):
                i, j = row_index[r["intensity_bin"]], col_index[r["spread_vol_bin"]]
                bias = r["relative_bias"]
                if r["n_estimates"] >= min_cell and bias is not None and math.isfinite(bias):
                    values[i][j] = 100.0 * bias
                    notes[i][j] = f"{100.0 * bias:+.0f}%\nn={r['n_estimates']}"
                else:
                    notes[i][j] = f"n={r['n_estimates']}"
            panels[(labels or {}).get(name) or name] = (values, notes)
        if not panels:
            continue
        first = next(n for n in by_cell.filter(pl.col("kind") == kind).get_column("estimator") if n not in skip)
        draws = by_cell.filter(pl.col("estimator") == first).get_column("n").sum()
        paths += figures.heat_maps(
            panels, stem=Path(out_dir) / f"study_bias_{kind}", rid=rid, limit=limit,
            title=f"Mean bias of the {kind} estimators by condition ({draws} simulated security-months)",
            xlabel="true spread / daily volatility (ratio)", ylabel="true trades per day (mean)",
            colorbar_label=f"mean bias, % of the mean true {kind}",
            col_labels=cols.get_column("spread_vol_range").to_list(), row_labels=rows.get_column("intensity_range").to_list(),
        )
    return paths


def _fmt(x: float | None) -> str:
    return "n/a" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.2f}"


__all__ = [
    "Blend", "DEFAULTS", "Estimate", "Market", "blend_weights", "fit_blend", "StudyResult", "add_bins", "calibrate", "check_settings", "describe_conditions",
    "draw_conditions", "estimates_of", "estimator_selection", "long_estimates", "ranking", "run_study", "settings",
    "simulate_draws", "summarise", "summary_text",
]
