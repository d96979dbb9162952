"""The report stage: ``results/<run-id>/`` with tables, figures, data, manifest.

Run identity. The run-id is the first 12 hex digits of SHA-256 over
(the config as run, the SHA-256 of every input file, the package version),
so the same inputs give the same folder name. Two things in the config are
not hashed as written, so that the run-id does not depend on where the
files live: every input path (a string directly under ``inputs:``, the
``path`` of an entry in a list under ``inputs:``, and the market profile)
is replaced by the SHA-256 of the file's contents (a glob by the list of its
matches' checksums, in name order), and the two output locations
``run.results_dir`` and ``run.work_dir`` are left out (they change no
number). :func:`run_identity` returns exactly what is hashed; the manifest
records it, so anyone can recompute the run-id.

Tables are written as CSV (full precision), LaTeX (booktabs, decimals
aligned, caption, label and notes) and Markdown, by :class:`RunFolder`,
which also remembers each table's and figure's caption for the manifest,
the replication README and Snakemake's HTML report.
"""

from __future__ import annotations

import copy
import hashlib
import importlib.metadata
import json
import math
import os
import platform
import re
import shutil
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import polars as pl

import liqpanel
from liqpanel.clean import RULES_OF
from liqpanel.errors import InputError
from liqpanel.formatting import format_frame, relabel
from liqpanel.io import expand_inputs, sha256_file, write_parquet, write_text

DEPENDENCIES = (
    "polars", "pandas", "pyarrow", "numpy", "scipy", "linearmodels", "statsmodels",
    "matplotlib", "snakemake", "pyyaml", "jsonschema",
)
OUTPUT_LOCATIONS = ("results_dir", "work_dir")
CHECKSUM_CACHE = Path(".snakemake") / "liqpanel-checksums.json"


def canonical_json(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)


# ---------------------------------------------------------------- identity

def input_entries(config: dict) -> list[tuple[str, str]]:
    """(where in the config, path) of every input file the config names.

    Inputs are the strings directly under ``inputs:``, the ``path`` of each
    entry of a list under ``inputs:`` (e.g. characteristics sources), and the
    market profile.
    """
    from liqpanel.config import load_market, market_path

    entries = []
    for key, value in sorted((config.get("inputs") or {}).items()):
        if isinstance(value, str):
            entries.append((f"inputs.{key}", value))
        elif isinstance(value, list):
            entries += [
                (f"inputs.{key}[{i}].path", item["path"])
                for i, item in enumerate(value)
                if isinstance(item, dict) and isinstance(item.get("path"), str)
            ]
    if isinstance(config.get("market"), str):
        load_market(config["market"])  # a clear error if the profile is missing
        entries.append(("market", _shown_path(market_path(config["market"]))))
    for code, name in sorted(((config.get("markets") or {}).get("profiles") or {}).items()):
        load_market(str(name))
        entries.append((f"markets.profiles.{code}", _shown_path(market_path(str(name)))))
    return entries


def _shown_path(path: Path) -> str:
    """Relative to the working directory when inside it (so checksum files travel)."""
    try:
        return str(path.resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(path)


def input_files(config: dict) -> list[str]:
    """Every input file the config names, globs expanded, sorted."""
    return sorted({f for _, path in input_entries(config) for f in expand_inputs(path)})


def _file_key(path: str) -> str:
    st = os.stat(path)
    return f"{st.st_size}:{st.st_mtime_ns}:{st.st_ino}"


def input_checksum(path: str, cache: dict[str, dict[str, str]] | None = None) -> str:
    """SHA-256 of an input file, reused from ``cache`` while size and mtime are unchanged."""
    real, key = os.path.realpath(path), _file_key(path)
    hit = (cache or {}).get(real)
    if hit and hit.get("key") == key:
        return hit["sha256"]
    digest = sha256_file(path)
    if cache is not None:
        cache[real] = {"key": key, "sha256": digest}
    return digest


def _load_cache() -> dict:
    try:
        return json.loads(CHECKSUM_CACHE.read_text())
    except (OSError, ValueError):
        return {}


def run_identity(config: dict, version: str = liqpanel.__version__, *, use_cache: bool = True) -> dict:
    """What the run-id hashes: the config as run with input paths replaced by
    content checksums and output locations left out, and the package version."""
    cache = _load_cache() if use_cache else None
    before = copy.deepcopy(cache)
    ident = copy.deepcopy(config)
    for key in OUTPUT_LOCATIONS:
        (ident.get("run") or {}).pop(key, None)
    for where, path in input_entries(config):
        files = expand_inputs(path)
        sums = [input_checksum(f, cache) for f in files]
        digest = sums[0] if len(files) == 1 and files[0] == path else sums
        _set(ident, where, {"sha256": digest})
    if use_cache and cache != before and CHECKSUM_CACHE.parent.is_dir():
        write_text(json.dumps(cache, indent=1, sort_keys=True) + "\n", CHECKSUM_CACHE)
    return {"config": ident, "version": version}


def _set(obj: dict, where: str, value: Any) -> None:
    """Set ``obj`` at a path like ``inputs.characteristics[0].path``."""
    parts = re.findall(r"[^.\[\]]+|\[\d+\]", where)
    for part in parts[:-1]:
        obj = obj[int(part[1:-1])] if part.startswith("[") else obj[part]
    last = parts[-1]
    if last.startswith("["):
        obj[int(last[1:-1])] = value
    else:
        obj[last] = value


def run_id(config: dict, version: str = liqpanel.__version__, *, use_cache: bool = True) -> str:
    """12 hex digits of SHA-256 over :func:`run_identity`."""
    payload = canonical_json(run_identity(config, version, use_cache=use_cache))
    return hashlib.sha256(payload.encode()).hexdigest()[:12]


# ---------------------------------------------------------------- tables

_NUMBER = re.compile(r"^[(\[]?([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)[)\]]?\**$")


def number_in_text(text: str) -> float | None:
    """The number in a formatted cell such as ``0.488``, ``(1.962)``, ``-0.019**``; else None."""
    match = _NUMBER.match(text.strip()) if isinstance(text, str) else None
    return float(match.group(1)) if match else None


def format_number(value: float, digits: int) -> str:
    """``digits`` decimals; numbers too small for that keep three significant digits."""
    if math.isnan(value):
        return ""
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    size = abs(value)
    if size == 0 or size >= 10.0 ** -(digits - 2) or digits < 2:
        return f"{value:.{digits}f}"
    if size < 1e-10:
        return f"{value:.2e}"
    return f"{value:.{-math.floor(math.log10(size)) + 2}f}"


_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "_": r"\_", "#": r"\#", "$": r"\$",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
}


def _latex_escape(text: str) -> str:
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in text)


def _latex_number(text: str) -> str:
    return _latex_escape(text).replace("-", "$-$", 1) if "-" in text[:2] else _latex_escape(text)


def _decimal_column(cells: list[str]) -> bool:
    filled = [c for c in cells if c]
    return bool(filled) and all(number_in_text(c) is not None for c in filled)


def _split_decimal(text: str) -> tuple[str, str]:
    """``(1.962)`` -> ``("(1", ".962)")``: the two halves of a decimal-aligned cell."""
    cut = text.find(".")
    return (text, "") if cut < 0 else (text[:cut], text[cut:])


def to_latex(
    df: pl.DataFrame, *, caption: str, label: str, notes: str = "", digits: int = 3, labels: dict | None = None,
    by_row: bool = False,
) -> str:
    """A booktabs table with the caption above and the notes below.

    Numbers are printed by :mod:`liqpanel.formatting` (decimals by kind of
    number, months as YYYY-MM, headings and row labels through ``labels``).
    The first column (row labels) is left-aligned. Every other column whose
    cells are all numbers (plain, or decorated like ``(1.962)`` or ``0.05**``)
    is aligned on the decimal point: it is set as a pair of columns ``r@{}l``
    (integer part right-aligned, the rest left-aligned) under one heading, so
    it needs no LaTeX package beyond booktabs. Other columns are left-aligned.
    """
    headings, cells = format_frame(df, digits=digits, labels=labels, by_row=by_row)
    aligned = [i > 0 and _decimal_column([r[i] for r in cells]) for i in range(df.width)]
    spec = "".join("r@{}l" if a else "l" for a in aligned)
    head = [rf"\multicolumn{{2}}{{c}}{{{_latex_escape(c)}}}" if a else _latex_escape(c) for c, a in zip(headings, aligned)]
    lines = [
        r"% liqpanel table; needs \usepackage{booktabs}",
        r"\begin{table}[htbp]",
        r"\centering",
        rf"\caption{{{_latex_escape(caption)}}}",
        rf"\label{{{label}}}",
        rf"\begin{{tabular}}{{{spec}}}",
        r"\toprule",
        " & ".join(head) + r" \\",
        r"\midrule",
    ]
    for row in cells:
        parts = []
        for text, a in zip(row, aligned):
            parts += [_latex_number(p) for p in _split_decimal(text)] if a else [_latex_escape(text)]
        lines.append(" & ".join(parts) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    if notes:
        lines += [
            r"\par\medskip",
            r"\begin{minipage}{0.95\linewidth}\footnotesize",
            rf"\textit{{Notes:}} {_latex_escape(notes)}",
            r"\end{minipage}",
        ]
    lines.append(r"\end{table}")
    return "\n".join(lines) + "\n"


def to_markdown(
    df: pl.DataFrame, *, caption: str = "", notes: str = "", digits: int = 3, labels: dict | None = None,
    by_row: bool = False,
) -> str:
    """A pipe table: caption in bold above, notes in italics below; numbers as in :func:`to_latex`."""
    headings, cells = format_frame(df, digits=digits, labels=labels, by_row=by_row)
    header = "| " + " | ".join(headings) + " |"
    rule = "|" + "|".join(["---"] + ["---:"] * (df.width - 1)) + "|"
    rows = ["| " + " | ".join(row) + " |" for row in cells]
    head = [f"**{caption}**", ""] if caption else []
    tail = ["", f"*Notes:* {notes}"] if notes else []
    return "\n".join(head + [header, rule, *rows] + tail) + "\n"


def to_html(
    df: pl.DataFrame, *, caption: str, notes: str = "", digits: int = 3, labels: dict | None = None,
    by_row: bool = False, title: str = "",
) -> str:
    """A small standalone page: the caption, the table as printed in LaTeX and Markdown, the notes.

    Snakemake's HTML report (``make report``) shows it when a table is chosen.
    """
    from html import escape

    headings, cells = format_frame(df, digits=digits, labels=labels, by_row=by_row)
    numeric = [i > 0 and _decimal_column([r[i] for r in cells]) for i in range(df.width)]

    def row(tag: str, texts: list[str]) -> str:
        return "<tr>" + "".join(
            f'<{tag} class="{"num" if n else "text"}">{escape(t)}</{tag}>' for t, n in zip(texts, numeric)
        ) + "</tr>"

    body = "\n".join(row("td", r) for r in cells)
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{escape(title or caption)}</title>
<style>
body {{ font-family: Georgia, 'Times New Roman', serif; margin: 1.5em; color: #111; }}
table {{ border-collapse: collapse; border-top: 2px solid #111; border-bottom: 2px solid #111; }}
thead th {{ border-bottom: 1px solid #111; }}
th, td {{ padding: 0.2em 0.8em; }}
.num {{ text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }}
.text {{ text-align: left; }}
caption {{ caption-side: top; text-align: left; font-weight: bold; padding-bottom: 0.5em; }}
p.notes {{ max-width: 50em; font-size: 0.9em; }}
</style></head>
<body>
<table>
<caption>{escape(caption)}</caption>
<thead>{row("th", headings)}</thead>
<tbody>
{body}
</tbody>
</table>
{f'<p class="notes"><em>Notes:</em> {escape(notes)}</p>' if notes else ''}
</body></html>
"""


def write_table(
    df: pl.DataFrame, stem: str | Path, *, caption: str, label: str, notes: str = "",
    display: pl.DataFrame | None = None, digits: int = 3, labels: dict | None = None, by_row: bool = False,
) -> list[Path]:
    """Write ``stem``.csv (full precision), .tex (booktabs), .md and .html.

    ``display`` is the layout for print (e.g. coefficients over t-statistics
    in parentheses) when it differs from the numbers in the CSV. ``by_row``:
    the rows are different variables, so decimals follow each row's scale.
    """
    stem = Path(stem)
    shown = df if display is None else display
    style = {"digits": digits, "labels": labels, "by_row": by_row}
    csv = write_text(df.write_csv(), stem.with_suffix(".csv"))
    tex = write_text(to_latex(shown, caption=caption, label=label, notes=notes, **style), stem.with_suffix(".tex"))
    md = write_text(to_markdown(shown, caption=caption, notes=notes, **style), stem.with_suffix(".md"))
    html = write_text(to_html(shown, caption=caption, notes=notes, title=stem.name, **style), stem.with_suffix(".html"))
    return [csv, tex, md, html]


def join_notes(*parts: str) -> str:
    """Sentences joined with single spaces, each ending in a full stop."""
    out = []
    for part in parts:
        part = (part or "").strip()
        if part:
            out.append(part if part.endswith((".", "!", "?")) else part + ".")
    return " ".join(out)


class RunFolder:
    """Writes one run's tables and figures and remembers what each one is.

    Captions, LaTeX labels and notes come from the code that makes a table;
    ``report.captions.<name>`` in the config replaces the caption or label and
    adds a sentence to the notes. Every table's notes end with ``sample``
    (the sample the run covers). What was written is in :attr:`contents`,
    which goes into the manifest.
    """

    def __init__(
        self, path: str | Path, *, rid: str, captions: dict | None = None, sample: str = "", digits: int = 3,
        labels: dict | None = None,
    ):
        self.path = Path(path)
        self.rid = rid
        self.captions = captions or {}
        self.sample = sample
        self.digits = digits
        self.labels = labels or {}
        self.tables: dict[str, dict[str, Any]] = {}
        self.figures: dict[str, dict[str, Any]] = {}

    def _settings(self, name: str, caption: str, notes: str) -> tuple[str, str | None, str]:
        own = self.captions.get(name) or {}
        caption = own.get("caption", relabel(caption, self.labels))  # the user's own caption is kept as written
        return caption, own.get("label"), join_notes(notes, own.get("notes", ""), self.sample)

    def table(
        self, name: str, frame: pl.DataFrame, *, caption: str, notes: str = "", label: str | None = None,
        display: pl.DataFrame | None = None, by_row: bool = False,
    ) -> list[Path]:
        """Write a table (see :func:`write_table`); ``by_row`` when its rows are different variables."""
        caption, own_label, notes = self._settings(name, caption, notes)
        label = own_label or label or f"tab:{name}"
        paths = write_table(
            frame, self.path / "tables" / name, caption=caption, label=label, notes=notes, display=display,
            digits=self.digits, labels=self.labels, by_row=by_row,
        )
        self.tables[name] = {
            "caption": caption, "label": label, "notes": notes, "rows": frame.height,
            "columns": frame.columns, "files": [str(p.relative_to(self.path)) for p in paths],
        }
        return paths

    def figure(self, name: str, paths: list[Path], *, caption: str, notes: str = "") -> list[Path]:
        caption, _, notes = self._settings(name, caption, notes)
        self.figures[name] = {"caption": caption, "notes": notes, "files": [str(Path(p).relative_to(self.path)) for p in paths]}
        return paths

    def contents(self) -> dict[str, dict]:
        """Tables and figures with their captions; files written by other means are listed too."""
        tables = dict(self.tables)
        for csv in sorted((self.path / "tables").glob("*.csv")):
            tables.setdefault(csv.stem, {"caption": csv.stem.replace("_", " "), "files": [str(csv.relative_to(self.path))]})
        figures = dict(self.figures)
        for png in sorted((self.path / "figures").glob("*.png")):
            figures.setdefault(png.stem, {"caption": png.stem.replace("_", " "), "files": [str(png.relative_to(self.path))]})
        return {"tables": dict(sorted(tables.items())), "figures": dict(sorted(figures.items()))}


def sample_note(config: dict, monthly: pl.DataFrame) -> str:
    """``Sample: 40 securities, 2021-01 to 2022-12, 960 security-months.``"""
    n_sec = monthly.get_column("security").n_unique() if monthly.height else 0
    return (
        f"Sample: {n_sec} securities, {config['sample']['start']} to {config['sample']['end']}, "
        f"{monthly.height} security-months"
    )


_ESTIMATOR_WORDS = {
    "fama_macbeth": "Fama-MacBeth (1973) regressions",
    "pooled": "pooled OLS",
    "fixed_effects": "OLS with {effects} fixed effects",
    "driscoll_kraay": "OLS{with_effects}",
}


def _lags_words(lags: int | None) -> str:
    return "the Newey-West (1994) rule for the lag length" if lags is None else f"{lags} lags"


def _covariance_words(spec: Any) -> str:
    cov = spec.covariance
    if cov == "newey_west":
        return f"Newey-West (1987) standard errors of the average slope, {_lags_words(spec.lags)}"
    if cov == "plain":
        return "the standard error of the average slope"
    if cov == "clustered":
        return "standard errors clustered by " + " and ".join(spec.cluster)
    if cov == "robust":
        return "heteroskedasticity-robust (White 1980) standard errors"
    if cov == "bartlett":
        return f"Driscoll-Kraay (1998) standard errors, {_lags_words(spec.lags)}"
    return "conventional OLS standard errors"


def standard_errors_note(models: list[dict]) -> str:
    """How each regression's standard errors are computed, in words."""
    from liqpanel.models import ModelSpec

    described: dict[str, list[str]] = {}
    for entry in models:
        spec = ModelSpec.from_config(entry)
        effects = " and ".join(spec.effects)
        words = _ESTIMATOR_WORDS[spec.estimator].format(
            effects=effects or "no", with_effects=f" with {effects} fixed effects" if effects else ""
        )
        described.setdefault(f"{words} with {_covariance_words(spec)}", []).append(spec.name)
    if len(described) == 1:
        return f"t-statistics in parentheses. {next(iter(described))}"
    return "t-statistics in parentheses. " + "; ".join(f"{', '.join(names)}: {text}" for text, names in described.items())


def measure_sources(names: list[str]) -> str:
    """``Measures: roll_spread from Roll (1984), ...; amihud from Amihud (2002), ...``"""
    from liqpanel.measures import REGISTRY

    return "Measures: " + "; ".join(f"{n} from {REGISTRY[n].source}" for n in names) if names else ""


def currency_of(config: dict) -> str:
    """The currency named in the notes: ``report.currency``, else the reporting currency of several
    markets (``markets.reporting_currency``), else the market profile's, else 'currency units'."""
    own = (config.get("report") or {}).get("currency")
    if own:
        return own
    if config.get("markets"):
        return config["markets"]["reporting_currency"]
    try:
        from liqpanel.config import load_market

        return load_market(config["market"]).get("currency") or "currency units"
    except Exception:  # a profile given as a mapping or without a currency: say so plainly
        return "currency units"


def units_note(config: dict, measures: list[str]) -> str:
    """The units of the measures that ran, and the currency."""
    from liqpanel.measures import REGISTRY

    families = {REGISTRY[n].family for n in measures if n in REGISTRY}
    cur = currency_of(config)
    parts = []
    if families & {"spread", "impact"}:
        parts.append("spreads and price impact are fractions of the price (0.01 = 1%)")
    if "volatility" in families:
        parts.append("volatilities are daily, in decimals (realized variance: daily, squared)")
    if "amihud" in measures:
        scale = (config["measures"].get("amihud") or {}).get("scale", 1e6)
        words = {1e6: "million", 1e9: "billion", 1e3: "thousand"}.get(float(scale), f"{scale:g}")
        parts.append(f"Amihud illiquidity is the absolute daily return per {words} {cur} traded")
    if {"zero_return_share", "zero_return_share_traded"} & set(measures):
        parts.append("shares of zero-return days are fractions of the month's days")
    if config.get("markets"):
        parts.append(f"returns are decimal returns per month; prices in each market's own currency; dollar "
                     f"volume and market values in {cur}, {_conversion_note(config)}")
    else:
        parts.append(f"returns are decimal returns per month; prices and market values in {cur}")
    return "Units: " + "; ".join(parts)


def _conversion_note(config: dict) -> str:
    """Which markets' amounts were converted to the reporting currency, and at which rate."""
    from liqpanel.config import load_market

    spec = config["markets"]
    foreign = []
    for code, name in spec["profiles"].items():
        currency = load_market(str(name)).get("currency")
        if currency and str(currency) != str(spec["reporting_currency"]):
            foreign.append(f"{code} from {currency}")
    if not foreign:
        return "the currency of every market"
    return (f"converted ({', '.join(foreign)}) at the day's rate (daily amounts) and the month-end rate "
            "(market values)")


def measure_summary(monthly: pl.DataFrame, outputs: list[str]) -> pl.DataFrame:
    """Pooled distribution of each measure output over security-months."""
    rows = []
    for name in outputs:
        x = monthly.get_column(name).drop_nulls().drop_nans()
        rows.append(
            {
                "measure": name,
                "n": x.len(),
                "mean": x.mean(),
                "sd": x.std(),
                "p25": x.quantile(0.25, "linear"),
                "median": x.median(),
                "p75": x.quantile(0.75, "linear"),
                "missing_share": 1.0 - x.len() / monthly.height if monthly.height else None,
            }
        )
    return pl.DataFrame(rows, schema_overrides={"n": pl.Int64})


def audit_summary(audit: pl.DataFrame) -> pl.DataFrame:
    """Rows read, kept and dropped per rule of each table, over the whole sample."""
    if "table" not in audit.columns:
        audit = audit.with_columns(pl.lit("trades").alias("table"))
    tables = [t for t in RULES_OF if t in set(audit.get_column("table").to_list())]
    rows = []
    for table in tables:
        part = audit.filter(pl.col("table") == table)
        rules = [r for r in RULES_OF[table] if f"drop_{r}" in part.columns]
        totals = part.select(pl.col("rows_read", "rows_kept", *[f"drop_{r}" for r in rules]).sum())
        read = totals.item(0, "rows_read")
        entries = [("read", read), ("kept", totals.item(0, "rows_kept"))]
        entries += [(f"dropped: {r}", totals.item(0, f"drop_{r}")) for r in rules]
        if "kept_without_quote" in part.columns and part.get_column("kept_without_quote").is_not_null().any():
            entries.append(("kept without a quote", part.get_column("kept_without_quote").sum()))
        rows += [(table, label, int(count), count / read if read else None) for label, count in entries]
    return pl.DataFrame(
        {"table": [r[0] for r in rows], "rows": [r[1] for r in rows], "count": [r[2] for r in rows],
         "share": [r[3] for r in rows]},
        schema_overrides={"count": pl.Int64},
    )


def timestamp_notes(audit: pl.DataFrame) -> str:
    """How each table's timestamps were read, as stated in the audit."""
    if "timestamps" not in audit.columns:
        return ""
    pairs = audit.select("table", "timestamps").unique().drop_nulls().sort("table", "timestamps")
    return " ".join(f"Timestamps of the {t}: {n}." for t, n in pairs.iter_rows() if n)


def spread_against_truth(monthly: pl.DataFrame, truth: pl.DataFrame, measures: list[str]) -> pl.DataFrame:
    """Mean and median estimate against the true spread over security-months."""
    joined = monthly.join(truth.select("security", "month", "spread"), on=["security", "month"], how="inner").sort(
        "security", "month"
    )  # a join's row order is not fixed; the sums below must be
    rows = []
    for name in measures:
        both = joined.select(name, "spread").drop_nulls()
        err = both.get_column(name) - both.get_column("spread")
        rows.append(
            {
                "measure": name,
                "n": both.height,
                "mean_estimate": both.get_column(name).mean(),
                "mean_truth": both.get_column("spread").mean(),
                "mean_bias": err.mean(),
                "rmse": math.sqrt((err**2).mean()) if both.height else None,
                "correlation": both.select(pl.corr(name, "spread")).item() if both.height > 2 else None,
            }
        )
    return pl.DataFrame(rows, schema_overrides={"n": pl.Int64})


# ---------------------------------------------------------------- figures

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
    from liqpanel import figures

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
    from liqpanel import figures

    frame = aggregate.filter(pl.col(column).is_not_null()).sort("month")
    months = frame.get_column("month").to_list()
    return figures.line_chart(
        {f"market liquidity {what}": (months, frame.get_column(column).to_list())},
        stem=stem, title=f"Market-wide liquidity: {what}", ylabel="return per unit of signed dollar volume", rid=rid,
        hline=0.0,
    )


def figure_beta_portfolios(deciles: pl.DataFrame, column: str, what: str, stem: str | Path, rid: str) -> list[Path]:
    """A statistic of the portfolios sorted on liquidity beta, by portfolio (1 = lowest beta)."""
    from liqpanel import figures

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
    from liqpanel import figures

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
    from liqpanel import figures

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
    from liqpanel import figures

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


# ---------------------------------------------------------------- manifest

def _versions() -> dict[str, str]:
    out = {"python": sys.version.split()[0], "liqpanel": liqpanel.__version__}
    for name in DEPENDENCIES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def _environment() -> dict[str, str]:
    """Every distribution installed beside liqpanel, with its version."""
    found = {}
    for dist in importlib.metadata.distributions():
        name = dist.metadata["Name"]
        if name:
            found[name.lower()] = dist.version
    return dict(sorted(found.items()))


def machine() -> dict[str, Any]:
    """Where the run ran: platform, processor count, the table engine's threads."""
    return {
        "platform": platform.platform(),
        "processor": platform.processor() or platform.machine(),
        "cpus": os.cpu_count(),
        "python_implementation": platform.python_implementation(),
        "engine_threads": pl.thread_pool_size(),
    }


def _git(args: list[str], cwd: Path) -> str | None:
    try:
        return subprocess.run(["git", *args], cwd=cwd, capture_output=True, text=True, check=True, timeout=20).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return None


def git_state() -> dict[str, Any]:
    """Revision of the code that ran and whether it had uncommitted changes."""
    repo = Path(liqpanel.__file__).resolve().parents[2]
    if not (repo / "src" / "liqpanel").is_dir():  # installed from a wheel: no source tree to ask
        return {"revision": None, "dirty": None}
    status = _git(["status", "--porcelain", "--untracked-files=no"], repo)
    return {"revision": _git(["rev-parse", "HEAD"], repo), "dirty": bool(status) if status is not None else None}


def _row_count(path: Path) -> int | None:
    if path.suffix == ".parquet":
        return pl.scan_parquet(path).select(pl.len()).collect().item()
    if path.suffix == ".csv":
        return pl.scan_csv(path).select(pl.len()).collect().item()
    return None


def _file_entry(path: Path, root: Path | None = None) -> dict[str, Any]:
    return {
        "path": str(path.relative_to(root)) if root else str(path),
        "sha256": sha256_file(path),
        "bytes": path.stat().st_size,
        "rows": _row_count(path),
    }


def input_listing(config: dict) -> list[dict[str, Any]]:
    """Each input file with the config key that names it, SHA-256, bytes and rows."""
    listing = []
    for where, path in input_entries(config):
        for f in expand_inputs(path):
            listing.append({"role": where, **_file_entry(Path(f))})
    return sorted(listing, key=lambda e: (e["role"], e["path"]))


def check_identity(config: dict, rid: str) -> dict:
    """Recompute the run identity from the files as they are now.

    Raises InputError when it no longer gives ``rid``: an input file or the
    config changed while the workflow ran, and the tables would carry a
    run-id that does not describe them.
    """
    identity = run_identity(config, use_cache=False)
    now = hashlib.sha256(canonical_json(identity).encode()).hexdigest()[:12]
    if now != rid:
        raise InputError(
            f"the inputs changed while the workflow ran: the run started as {rid} but its inputs now give {now}; "
            "run it again on unchanged files"
        )
    return identity


def write_manifest(
    run_dir: Path, *, config: dict, inputs: list[dict[str, Any]] | list[str], rid: str, started: str, command: str,
    finished: str | None = None, identity: dict | None = None, contents: dict | None = None,
) -> Path:
    """``manifest.json``: what ran, on what, where, and what came out.

    Inputs and outputs with SHA-256, bytes and rows; the config as run
    (defaults filled in) and what the run-id hashes; Python and package
    versions (the declared dependencies and everything installed); machine;
    git revision and whether the tree had uncommitted changes; start and
    end times; the command line; the caption of every table and figure.
    """
    run_dir = Path(run_dir)
    outputs = sorted(
        p for p in run_dir.rglob("*")
        if p.is_file() and p.name != "manifest.json" and not p.name.endswith(".part") and p.name != ".snakemake_timestamp"
    )
    finished = finished or now()
    manifest = {
        "run_id": rid,
        "package_version": liqpanel.__version__,
        "started": started,
        "finished": finished,
        "elapsed_seconds": elapsed_seconds(started, finished),
        "command": command,
        "inputs": [e if isinstance(e, dict) else _file_entry(Path(e)) for e in inputs],
        "outputs": [_file_entry(p, run_dir) for p in outputs],
        "config": config,
        "identity": identity,
        "versions": _versions(),
        "environment": _environment(),
        "platform": platform.platform(),
        "machine": machine(),
        "git": git_state(),
        **(contents or {}),
    }
    return write_text(json.dumps(manifest, indent=2, sort_keys=True, default=str) + "\n", run_dir / "manifest.json")


def now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def elapsed_seconds(started: str, finished: str) -> float | None:
    try:
        return (datetime.fromisoformat(finished) - datetime.fromisoformat(started)).total_seconds()
    except (TypeError, ValueError):
        return None


def build_folder(results_dir: str | Path, rid: str) -> Path:
    """An empty folder beside ``results/<rid>`` to build the run in.

    The run is built there and moved into place by :func:`publish_folder`, so
    ``results/<rid>`` is either absent or complete; a build left by a killed
    run is removed here.
    """
    results_dir = Path(results_dir)
    results_dir.mkdir(parents=True, exist_ok=True)
    for stale in results_dir.glob(f".{rid}.building-*"):
        shutil.rmtree(stale, ignore_errors=True)
    folder = results_dir / f".{rid}.building-{os.getpid()}"
    folder.mkdir()
    return folder


def publish_folder(folder: Path, run_dir: str | Path) -> Path:
    """Move a finished build into ``run_dir`` in one step (an earlier copy is replaced)."""
    run_dir = Path(run_dir)
    if run_dir.exists():
        old = run_dir.with_name(f".{run_dir.name}.replaced-{os.getpid()}")
        os.replace(run_dir, old)
        shutil.rmtree(old, ignore_errors=True)
    os.replace(folder, run_dir)
    return run_dir


def _manifest_entry(run_dir: str | Path, kind: str, name: str) -> dict[str, Any]:
    try:
        manifest = json.loads((Path(run_dir) / "manifest.json").read_text())
    except (OSError, ValueError):
        return {}
    return (manifest.get(kind) or {}).get(name) or {}


def report_category(wildcards: Any) -> str:
    """Snakemake HTML report: the category of a file matched by the report rule's patterns."""
    return "Tables" if hasattr(wildcards, "table") else "Figures"


def report_labels(wildcards: Any, output: Any) -> dict[str, str]:
    """Snakemake HTML report: a table's or figure's name and caption, read from the run's manifest."""
    kind, name = ("tables", wildcards.table) if hasattr(wildcards, "table") else ("figures", wildcards.figure)
    return {"name": name, "caption": _manifest_entry(output[0], kind, name).get("caption", name.replace("_", " "))}


def point_latest(results_dir: Path, rid: str) -> None:
    """Make ``results/latest`` a relative symlink to the newest run."""
    link = results_dir / "latest"
    tmp = results_dir / f".latest.{os.getpid()}"
    if tmp.is_symlink() or tmp.exists():
        tmp.unlink()
    tmp.symlink_to(rid)
    os.replace(tmp, link)


def run_folder(config_path: str | Path) -> Path:
    """``results_dir/<run-id>``: where a run of the config at ``config_path`` is written."""
    from liqpanel.config import load_config

    config = load_config(config_path)
    return Path(config["run"]["results_dir"]) / run_id(config)
