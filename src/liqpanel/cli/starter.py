"""A starter config for a researcher who has a daily stock file.

``daily_starter(path)`` reads only the file's header (and its date column,
when one is recognised, for the sample window) and returns the text of a
config holding just the sections that apply to daily data. Every column of
the file gets a commented line under ``columns.daily``: a suggested column of
ours when the name suggests one (plain English words: "open", "high",
"close", "volume", ...), else ``?``. The user uncomments the lines that are
right, fixes the others, and runs ``liqpanel check-config``.
"""

from __future__ import annotations

import re
from pathlib import Path

from liqpanel.core.errors import InputError, LiqpanelError

# our daily columns: (name, what it holds); the first seven are required
DAILY_COLUMNS = (
    ("security", "the security's identifier"),
    ("date", "the trading day"),
    ("open", "first price of the day"),
    ("high", "highest price of the day"),
    ("low", "lowest price of the day"),
    ("close", "last price of the day"),
    ("volume", "shares traded"),
    ("dollar_volume", "value traded (default close x volume)"),
    ("n_trades", "number of trades"),
    ("ret", "the day's return, adjusted for splits and dividends (default close-to-close)"),
    ("shares_out", "shares outstanding (for turnover)"),
)
REQUIRED_DAILY = tuple(name for name, _ in DAILY_COLUMNS[:7])

# words in a column name that suggest one of ours, most specific first
SUGGESTIONS = (
    ("shares_out", ("shares", "outstanding", "shrs")),
    ("ret", ("return", "ret")),
    ("n_trades", ("trades", "deals", "count", "number")),
    ("dollar_volume", ("turnover", "amount", "value", "notional", "ccy", "dollar")),
    ("volume", ("volume", "vol", "qty", "quantity", "v")),
    ("open", ("open", "first", "o")),
    ("high", ("high", "top", "max", "h")),
    ("low", ("low", "bottom", "min", "l")),
    ("close", ("close", "last", "price", "c")),
    ("date", ("date", "day")),
    ("security", ("ticker", "tick", "symbol", "sym", "security", "id", "code", "isin")),
)

# measures a daily file gives, with the columns they need beyond the required ones
DAILY_MEASURES = (
    ("roll_spread", "Roll (1984)"),
    ("cs_spread", "Corwin & Schultz (2012)"),
    ("ar_spread_2day", "Abdi & Ranaldo (2017)"),
    ("edge_spread", "Ardia, Guidotti & Kroencke (2024)"),
    ("amihud", "Amihud (2002)"),
    ("zero_return_share", "Lesmond, Ogden & Trzcinka (1999)"),
    ("vol_close", "close-to-close volatility"),
    ("vol_yang_zhang", "Yang & Zhang (2000)"),
)


def suggest_columns(names: list[str]) -> dict[str, str | None]:
    """For each of the file's column names, the column of ours it seems to hold (None: no idea).

    Each of ours is suggested once, for the first column that fits; a column
    already named like ours is taken as it is.
    """
    taken = {n for n in names if n in dict(DAILY_COLUMNS)}
    out: dict[str, str | None] = {}
    for name in names:
        if name in dict(DAILY_COLUMNS):
            out[name] = name
            continue
        words = set(re.split(r"[^a-z0-9]+", name.lower())) | {name.lower()}
        guess = None
        for ours, hints in SUGGESTIONS:
            if ours not in taken and any(h in words or (len(h) > 3 and h in name.lower()) for h in hints):
                guess = ours
                break
        if guess:
            taken.add(guess)
        out[name] = guess
    return out


def _sample_window(path: str, names: list[str], suggested: dict[str, str | None], separator: str) -> tuple[str, str] | None:
    """The first and last month of the file, when a column was recognised as its date and parses."""
    from liqpanel.preflight import InputSource, date_range

    mapping = {theirs: ours for theirs, ours in suggested.items() if ours and theirs != ours}
    source = InputSource(key="daily", table="daily", path=path, mapping=mapping, formats={"separator": separator},
                         date_column="date", headers={path: names})
    try:
        span = date_range(source)
    except LiqpanelError:
        return None
    return (span[0].strftime("%Y-%m"), span[1].strftime("%Y-%m")) if span else None


def daily_starter(path: str | Path, *, separator: str = ",", name: str = "my-daily-run") -> str:
    """The text of a starter config for the daily file ``path`` (only its header and dates are read)."""
    from liqpanel.config import MARKETS_DIR
    from liqpanel.preflight import read_header

    path = str(path)
    if not Path(path).is_file():
        raise InputError("no such file", path=path)
    try:
        names = read_header(path, separator)
    except LiqpanelError as exc:
        raise InputError(str(exc), path=path) from None
    suggested = suggest_columns(names)
    window = _sample_window(path, names, suggested, separator)
    start, end = window if window else ("YYYY-MM", "YYYY-MM")
    markets = ", ".join(sorted(p.stem for p in MARKETS_DIR.glob("*.yaml")))
    width = max([len(n) for n in names] + [8]) + 2

    lines = [
        f"# A starter config for the daily file {path}, written by `liqpanel daily-starter`.",
        "#  1. Under columns.daily, uncomment each line whose suggestion is right and fix the others",
        "#     (a line with '?' names a column of yours we could not place: map it or leave it commented).",
        "#  2. Set sample: to the months to study and market: to your market's profile.",
        "#  3. Check:  liqpanel check-config THIS_FILE     then run:  liqpanel run --config THIS_FILE",
        "# Keep licensed data out of version control.",
        "run:",
        f"  name: {name}",
        "  results_dir: results",
        "  work_dir: work",
        "",
        "sample:                     # months to study, YYYY-MM"
        + (f" (the file's dates run from {start} to {end})" if window else " (set both)"),
        f'  start: "{start}"',
        f'  end: "{end}"',
        "",
        f"market: demo                # a profile shipped with liqpanel ({markets}) or a path to your own",
        "",
        "inputs:",
        f"  daily: {path}",
        "  # returns: monthly_returns.parquet   # monthly returns (security, month, ret); else compounded from the daily file",
        "  # characteristics:                    # firm characteristics, merged without look-ahead",
        "  #   - name: firm_data",
        "  #     path: characteristics.parquet",
        "  #     date_column: date",
        "  #     lag_months: 0                   # months after its date a value becomes public",
        "  #     variables: [market_cap, log_size]",
        "",
        "columns:",
        "  daily:                    # your column: ours. Ours are",
    ]
    for ours, meaning in DAILY_COLUMNS:
        need = "required" if ours in REQUIRED_DAILY else "optional"
        lines.append(f"    #   {ours:<14} {meaning} ({need})")
    for theirs in names:
        ours = suggested[theirs]
        key = theirs if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", theirs) else '"' + theirs.replace('"', '\\"') + '"'
        if ours == theirs:
            lines.append(f"    # {key + ':':<{width}} {ours:<14}# already our name: no mapping needed")
        elif ours:
            lines.append(f"    # {key + ':':<{width}} {ours:<14}# suggested from the name: check it")
        else:
            lines.append(f"    # {key + ':':<{width}} ?")
    missing = [c for c in REQUIRED_DAILY if c not in suggested.values()]
    if missing:
        lines.append(f"    # no column of the file was placed as {', '.join(missing)}: map yours to them")
    lines += [
        "",
        "# formats:                  # how the file writes dates, missing values and returns, when not YYYY-MM-DD,",
        "#                           # empty and decimals (0.012 for 1.2%)",
        f'#   daily: {{date_format: "%d/%m/%Y", missing: ["NA"], separator: "{separator}", returns_in: percent}}',
        "",
        "measures:                   # measures of daily data; `liqpanel measures` lists all",
    ]
    for measure, source in DAILY_MEASURES:
        lines.append(f"  {measure + ':':<22}{{}}    # {source}")
    lines += [
        "  # turnover: {}            # needs shares_out (shares outstanding) in the daily file",
        "",
        "panel:",
        "  log: [amihud]             # adds log_amihud",
        "",
        "models:",
        "  regressions:              # next month's return on this month's liquidity",
        "    - name: spread_only",
        "      regressors: [roll_spread]",
        "      estimator: fama_macbeth",
        "    - name: two_measures",
        "      regressors: [cs_spread, log_amihud]",
        "      estimator: fama_macbeth",
        "    # with characteristics:  regressors: [roll_spread, log_size]",
        "  sorts:",
        "    - name: spread_terciles",
        "      variable: cs_spread",
        "      portfolios: 3",
        "      weight: equal           # value needs market_cap among the characteristics",
        "",
    ]
    return "\n".join(lines)


def write_daily_starter(path: str | Path, out: str | Path, *, separator: str = ",", force: bool = False) -> Path:
    """Write :func:`daily_starter` to ``out``; an existing file is kept unless ``force``."""
    out = Path(out)
    if out.exists() and not force:
        raise InputError("the file exists already; choose another name or pass --force to replace it", path=str(out))
    text = daily_starter(path, separator=separator)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text)
    return out
