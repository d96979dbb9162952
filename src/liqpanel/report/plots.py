"""The run's figures: labels, portfolio lines, market liquidity, cumulative returns, spreads and proxies."""

from __future__ import annotations

from pathlib import Path

import polars as pl


def label_of(name: str, labels: dict | None = None) -> str:
    """A variable's name in print: ``report.labels.<name>`` of the config, else the name itself."""
    return (labels or {}).get(name) or name


def liquidity_ends(variable: str) -> tuple[str, str] | None:
    """What the lowest and the highest values of ``variable`` mean for liquidity, or None.

    Spreads, price impact and the share of zero returns are high when a
    security is illiquid; turnover is high when it is liquid; the
    Pastor-Stambaugh gamma is more negative for illiquid securities (Pastor &
    Stambaugh 2003). Other variables (size, volatility) say nothing by
    themselves.
    """
    from liqpanel.measures import REGISTRY

    owner = next((m for m in REGISTRY.values() if variable in m.outputs), None)
    if owner is None:
        return None
    if owner.name in ("turnover", "ps_gamma"):
        return "least liquid", "most liquid"
    if owner.family in ("spread", "impact") or owner.name.startswith("zero_return_share"):
        return "most liquid", "least liquid"
    return None


def _end_word(variable: str, group: int, groups: int) -> str:
    ends = liquidity_ends(variable) or ("lowest", "highest")
    return f" ({ends[0]})" if group == 1 else f" ({ends[1]})" if group == groups else ""


def portfolio_lines(series: pl.DataFrame, spec: dict | None, labels: dict | None = None) -> list:
    """The cumulative-value lines of one sort (``month, portfolio, ret``), labelled for print.

    Each line starts at 1 at the first formation month; a return dated by its
    formation month is earned the month after (missing months count as 0).
    Single sorts label the ends, "1 (most liquid)" ... "3 (least liquid)";
    a double sort's labels name both variables, its colours follow the second
    sort and its line styles the first. The high-minus-low line is drawn as
    the benchmark.
    """
    from liqpanel.report import figures

    start = series.get_column("month").min()
    names = sorted(series.get_column("portfolio").unique().to_list(), key=lambda p: (p == "high-low", p))
    variable = (spec or {}).get("variable", "")
    n2 = int((spec or {}).get("portfolios", 0) or 0)
    first, n1 = (spec or {}).get("within"), int((spec or {}).get("within_portfolios", 0) or 0)
    colours = figures.series_styles(max(n2, 1))
    lines = []
    for name in names:
        frame = series.filter(pl.col("portfolio") == name).sort("month")
        growth = [1.0] + (frame.get_column("ret").fill_null(0.0) + 1.0).cum_prod().to_list()
        x = [start] + frame.get_column("month").dt.offset_by("1mo").to_list()
        parts = name.split("-")
        if name == "high-low":
            ends = liquidity_ends(variable)
            words = f" ({ends[1]} minus {ends[0]})" if ends else ""
            lines.append(figures.Series(f"{n2} minus 1{words}" if n2 else "high minus low", x, growth, benchmark=True))
        elif name == "factor":
            lines.append(figures.Series("liquidity factor", x, growth, benchmark=True))
        elif first and len(parts) == 2 and all(p.isdigit() for p in parts):
            a, b = int(parts[0]), int(parts[1])
            label = (f"{label_of(first, labels)} {a}{_end_word(first, a, n1)}, "
                     f"{label_of(variable, labels)} {b}{_end_word(variable, b, n2)}")
            look = {"color": colours[(b - 1) % len(colours)]["color"],
                    "linestyle": figures.LINESTYLES[(a - 1) % len(figures.LINESTYLES)]}
            lines.append(figures.Series(label, x, growth, style=look))
        elif name.isdigit() and variable:
            lines.append(figures.Series(f"{name}{_end_word(variable, int(name), n2)}", x, growth))
        else:
            lines.append(figures.Series(name, x, growth))
    return lines


def figure_market_liquidity(aggregate: pl.DataFrame, column: str, what: str, stem: str | Path, rid: str) -> list[Path]:
    """One series of the market's liquidity (``level`` or ``innovation``) by month, with a zero line."""
    from liqpanel.report import figures

    frame = aggregate.filter(pl.col(column).is_not_null()).sort("month")
    months = frame.get_column("month").to_list()
    return figures.line_chart(
        {f"market liquidity {what}": (months, frame.get_column(column).to_list())},
        stem=stem, title=f"Market-wide liquidity: {what}", ylabel="return per unit of signed dollar volume", rid=rid,
        hline=0.0,
    )


def figure_beta_portfolios(deciles: pl.DataFrame, column: str, what: str, stem: str | Path, rid: str) -> list[Path]:
    """A statistic of the portfolios sorted on liquidity beta, by portfolio (1 = lowest beta)."""
    from liqpanel.report import figures

    frame = deciles.with_columns(pl.col("portfolio").cast(pl.Int64)).sort("portfolio")
    scale, unit = (100.0, "% per month") if column == "mean_ret" else (1.0, "per unit of the liquidity innovation")
    return figures.line_chart(
        {what: (frame.get_column("portfolio").to_list(), (frame.get_column(column) * scale).to_list())},
        stem=stem, title=f"Portfolios on liquidity beta: {what}", ylabel=f"{what} ({unit})",
        xlabel="portfolio (1 = lowest liquidity beta)", rid=rid,
    )


def factor_columns_text(units: dict[str, str]) -> str:
    """A short Markdown description of ``factors.csv`` / ``factors.parquet``: one line per column."""
    lines = ["# Factor series", "", "One row per calendar month (`month`, the first day of the month).", ""]
    lines += [f"- `{name}`: {text}" for name, text in units.items()]
    return "\n".join(lines) + "\n"


def sort_title(spec: dict | None, labels: dict | None = None) -> tuple[str, str | None]:
    """Figure title and legend title of a sort's cumulative-value figure."""
    if not spec:
        return "Cumulative value of 1 invested", None
    weight = f"{spec.get('weight', 'equal')}-weighted"
    var = label_of(spec["variable"], labels)
    if spec.get("within"):
        first = label_of(spec["within"], labels)
        return (f"Cumulative value of 1 invested: {spec.get('within_portfolios', 2)} {first} groups, "
                f"then {spec.get('portfolios', 3)} {var} groups ({weight})",
                f"{first} group, {var} group")
    return f"Cumulative value of 1 invested: {spec.get('portfolios', 5)} {var} groups ({weight})", f"{var} group"


def figure_cumulative(
    series: pl.DataFrame, stem: str | Path, rid: str, *, spec: dict | None = None, labels: dict | None = None,
    title: str | None = None,
) -> list[Path]:
    """Cumulative value of 1 invested in each portfolio of a sort (``month, portfolio, ret``)."""
    from liqpanel.report import figures

    default_title, legend_title = sort_title(spec, labels)
    return figures.line_chart(
        portfolio_lines(series, spec, labels), stem=stem, title=title or default_title,
        ylabel="value of 1 invested", rid=rid, legend_title=legend_title, hline=1.0,
    )


def figure_median_spread(
    monthly: pl.DataFrame, truth: pl.DataFrame | None, measures: list[str], stem: str | Path, rid: str,
    *, labels: dict | None = None, title: str | None = None,
) -> list[Path]:
    """Monthly cross-sectional median of spread measures (and of the truth), percent of price.

    The true spread is drawn as the black benchmark; with the truth absent,
    the effective spread (the high-frequency benchmark) takes its place.
    """
    from liqpanel.report import figures

    def median(frame: pl.DataFrame, column: str) -> tuple[list, list]:
        by = frame.group_by("month").agg(pl.col(column).median().alias("v")).sort("month")
        return by.get_column("month").to_list(), (by.get_column("v") * 100).to_list()

    lines = []
    if truth is not None:
        lines.append(figures.Series("true spread", *median(truth, "spread"), benchmark=True))
    for m in measures:
        benchmark = truth is None and m == "effective_spread"
        lines.append(figures.Series(label_of(m, labels), *median(monthly, m), benchmark=benchmark))
    lines.sort(key=lambda s: not s.benchmark)
    shown = "the spread estimates" if len(measures) > 1 else label_of(measures[0], labels)
    return figures.line_chart(
        lines, stem=stem, rid=rid, ylabel="median spread (% of price)",
        title=title or f"Median across securities of {shown}, by month"
        + (", against the true spread" if truth is not None else ""),
    )


def figure_proxy_scatter(
    monthly: pl.DataFrame, benchmark: str, proxies: list[str], stem: str | Path, rid: str, *, labels: dict | None = None,
) -> list[Path]:
    """Each proxy against the benchmark over security-months, one panel each (percent of price)."""
    from liqpanel.report import figures

    panels = {}
    for proxy in proxies:
        both = monthly.select(benchmark, proxy).drop_nulls().drop_nans()
        panels[label_of(proxy, labels)] = ((both.get_column(benchmark) * 100).to_list(),
                                           (both.get_column(proxy) * 100).to_list())
    bench = label_of(benchmark, labels)
    return figures.panel_scatter(
        panels, stem=stem, rid=rid, title=f"Spread proxies against the {bench}, by security-month",
        xlabel=f"{bench} (% of price)", ylabel="proxy (% of price)",
    )
