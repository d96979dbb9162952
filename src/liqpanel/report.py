"""The report stage: ``results/<run-id>/`` with tables, figures, data, manifest.

The run-id is a short hash of the config as run, the SHA-256 of every input
file and the package version, so the same inputs give the same folder name.
Tables are written as CSV (full precision), LaTeX (booktabs) and Markdown.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import json
import math
import os
import platform
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import polars as pl

import liqpanel
from liqpanel.clean import RULES_OF
from liqpanel.io import sha256_file, write_parquet, write_text
from liqpanel.readers import list_files

DEPENDENCIES = (
    "polars", "pandas", "pyarrow", "numpy", "scipy", "linearmodels", "statsmodels",
    "matplotlib", "snakemake", "pyyaml", "jsonschema",
)


def canonical_json(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)


def run_id(config: dict, inputs: list[str | Path], version: str = liqpanel.__version__) -> str:
    """12 hex digits of SHA-256 over (config, input checksums, package version)."""
    checksums = {str(p): sha256_file(p) for p in sorted(map(str, inputs))}
    payload = canonical_json({"config": config, "inputs": checksums, "version": version})
    return hashlib.sha256(payload.encode()).hexdigest()[:12]


def input_files(config: dict) -> list[str]:
    """Every input file the config names (characteristics included)."""
    inputs = config.get("inputs", {})
    files = [inputs[k] for k in ("trades", "quotes", "adjustments", "daily", "returns", "truth") if inputs.get(k)]
    files += [c["path"] for c in inputs.get("characteristics", [])]
    return sorted({f for path in files for f in list_files(path)})


# ---------------------------------------------------------------- tables

def _cell(value: Any, digits: int) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return f"{value:.{digits}f}"
    return str(value)


def _latex_escape(text: str) -> str:
    for a, b in (("\\", r"\textbackslash{}"), ("&", r"\&"), ("%", r"\%"), ("_", r"\_"), ("#", r"\#"), ("$", r"\$")):
        text = text.replace(a, b)
    return text


def to_latex(df: pl.DataFrame, *, caption: str, label: str, notes: str = "", digits: int = 4) -> str:
    """A booktabs table: first column left-aligned, the rest right-aligned."""
    align = "l" + "r" * (df.width - 1)
    lines = [
        r"\begin{table}[htbp]",
        r"\centering",
        rf"\caption{{{_latex_escape(caption)}}}",
        rf"\label{{{label}}}",
        rf"\begin{{tabular}}{{{align}}}",
        r"\toprule",
        " & ".join(_latex_escape(c) for c in df.columns) + r" \\",
        r"\midrule",
    ]
    for row in df.iter_rows():
        lines.append(" & ".join(_latex_escape(_cell(v, digits)) for v in row) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    if notes:
        lines.append(rf"\par\smallskip\footnotesize {_latex_escape(notes)}")
    lines.append(r"\end{table}")
    return "\n".join(lines) + "\n"


def to_markdown(df: pl.DataFrame, *, caption: str = "", digits: int = 4) -> str:
    header = "| " + " | ".join(df.columns) + " |"
    rule = "|" + "|".join(["---"] + ["---:"] * (df.width - 1)) + "|"
    rows = ["| " + " | ".join(_cell(v, digits) for v in row) + " |" for row in df.iter_rows()]
    head = [f"**{caption}**", ""] if caption else []
    return "\n".join(head + [header, rule, *rows]) + "\n"


def write_table(df: pl.DataFrame, stem: str | Path, *, caption: str, label: str, notes: str = "") -> list[Path]:
    """Write ``stem``.csv (full precision), .tex (booktabs) and .md."""
    stem = Path(stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    csv = stem.with_suffix(".csv")
    write_text(df.write_csv(), csv)
    tex = write_text(to_latex(df, caption=caption, label=label, notes=notes), stem.with_suffix(".tex"))
    md = write_text(to_markdown(df, caption=caption), stem.with_suffix(".md"))
    return [csv, tex, md]


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
    joined = monthly.join(truth.select("security", "month", "spread"), on=["security", "month"], how="inner")
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

def figure_median_spread(
    monthly: pl.DataFrame, truth: pl.DataFrame | None, measures: list[str], stem: str | Path, rid: str
) -> list[Path]:
    """Monthly cross-sectional median of spread measures (and of the truth)."""
    from liqpanel import figures

    frames = {m: monthly.group_by("month").agg(pl.col(m).median().alias("v")).sort("month") for m in measures}
    if truth is not None:
        frames["true spread"] = truth.group_by("month").agg(pl.col("spread").median().alias("v")).sort("month")
    return figures.line_chart(
        {label: (df.get_column("month").to_list(), (df.get_column("v") * 100).to_list()) for label, df in frames.items()},
        stem=stem,
        title="Cross-sectional median spread" + (" against the truth" if truth is not None else ""),
        ylabel="spread (% of price)",
        rid=rid,
    )


def figure_cumulative(series: pl.DataFrame, stem: str | Path, rid: str) -> list[Path]:
    """Cumulative growth of 1 in each portfolio (month, portfolio, ret).

    Returns are dated by formation month and earned the month after, so the
    x axis is the month the return is earned. Missing months count as 0.
    """
    from liqpanel import figures

    lines = {}
    for (label,), frame in sorted(series.group_by("portfolio"), key=lambda kv: str(kv[0][0])):
        frame = frame.sort("month")
        growth = (frame.get_column("ret").fill_null(0.0) + 1.0).cum_prod()
        lines[str(label)] = (frame.get_column("month").dt.offset_by("1mo").to_list(), growth.to_list())
    return figures.line_chart(lines, stem=stem, title="Cumulative return", ylabel="value of 1 invested", rid=rid)


def figure_proxy_scatter(monthly: pl.DataFrame, benchmark: str, proxies: list[str], stem: str | Path, rid: str) -> list[Path]:
    """Each proxy against the benchmark over security-months (percent of price)."""
    from liqpanel import figures

    points = {}
    for proxy in proxies:
        both = monthly.select(benchmark, proxy).drop_nulls()
        points[proxy] = ((both.get_column(benchmark) * 100).to_list(), (both.get_column(proxy) * 100).to_list())
    return figures.scatter_chart(
        points, stem=stem, title=f"Spread proxies against {benchmark}",
        xlabel=f"{benchmark} (% of price)", ylabel="proxy (% of price)", rid=rid,
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


def _git(args: list[str], cwd: Path) -> str | None:
    try:
        return subprocess.run(["git", *args], cwd=cwd, capture_output=True, text=True, check=True, timeout=20).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return None


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


def write_manifest(run_dir: Path, *, config: dict, inputs: list[str], rid: str, started: str, command: str) -> Path:
    """``manifest.json``: inputs and outputs with SHA-256, config, versions, git."""
    repo = Path(liqpanel.__file__).resolve().parents[2]
    outputs = sorted(p for p in run_dir.rglob("*") if p.is_file() and p.name != "manifest.json" and not p.name.endswith(".part"))
    status = _git(["status", "--porcelain"], repo)
    manifest = {
        "run_id": rid,
        "package_version": liqpanel.__version__,
        "started": started,
        "finished": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "command": command,
        "inputs": [_file_entry(Path(p)) for p in inputs],
        "outputs": [_file_entry(p, run_dir) for p in outputs],
        "config": config,
        "versions": _versions(),
        "platform": platform.platform(),
        "git": {"revision": _git(["rev-parse", "HEAD"], repo), "dirty": bool(status) if status is not None else None},
    }
    return write_text(json.dumps(manifest, indent=2, sort_keys=True, default=str) + "\n", run_dir / "manifest.json")


def point_latest(results_dir: Path, rid: str) -> None:
    """Make ``results/latest`` a relative symlink to the newest run."""
    link = results_dir / "latest"
    tmp = results_dir / f".latest.{os.getpid()}"
    if tmp.is_symlink() or tmp.exists():
        tmp.unlink()
    tmp.symlink_to(rid)
    os.replace(tmp, link)
