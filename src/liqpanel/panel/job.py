"""The panel job: monthly measures, returns and characteristics merged without look-ahead."""

from __future__ import annotations

import polars as pl

from liqpanel import ingest
from liqpanel.core.io import write_parquet
from liqpanel.core.settings import InputSettings, MarketSettings, PanelSettings
from liqpanel.markets.several import load_markets


def run_panel(monthly_path: str, daily_paths: list[str], out: str, audit_out: str | None = None, *,
              inputs: InputSettings, market: MarketSettings, panel: PanelSettings) -> None:
    """The panel (``out``) and, at ``audit_out``, where every characteristics row went (``characteristics_audit``)."""
    from liqpanel.panel import (
        build_panel, characteristics_audit, check_overlap, monthly_from_daily, read_characteristics, read_monthly_returns,
        transform_panel,
    )

    source = panel.return_source
    securities = pl.scan_parquet(monthly_path).select("security").unique().collect().get_column("security")
    if source == "monthly_file" or (source == "auto" and inputs.path("returns")):
        layout = ingest.layout_of(inputs.as_config(), "returns")
        returns = read_monthly_returns(layout)
        check_overlap(securities, returns.select("security").collect(), what="monthly returns file", path=layout.path,
                      column=layout.theirs("security"))
    else:
        # a month partition holds whole security-months: compounded one partition at a time (the same
        # products, in the same day order), many small groupings instead of one of the whole sample
        returns = pl.concat([monthly_from_daily(pl.scan_parquet(p)) for p in daily_paths])
    chars = [{**c, "frame": read_characteristics(c).lazy()} for c in inputs.as_config()["inputs"]["characteristics"]]
    for c in chars:
        check_overlap(securities, c["frame"].select("security").collect(), what=f"characteristics file '{c['name']}'",
                      path=c["path"], column=ingest.characteristics_layout(c).theirs("security"))
    built = build_panel(pl.scan_parquet(monthly_path), returns=returns, characteristics=chars)
    if market.markets:
        from liqpanel.markets.several import panel_to_reporting

        config = market.as_config(inputs)
        built = panel_to_reporting(built.collect() if isinstance(built, pl.LazyFrame) else built, config,
                                   load_markets(config))
    write_parquet(transform_panel(built, panel.as_dict()), out)
    if audit_out:
        write_parquet(characteristics_audit(built.select("security", "month"), chars), audit_out)
