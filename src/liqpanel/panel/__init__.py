"""The panel stage: monthly measures + characteristics + next-month returns, without look-ahead (``build``)."""

from __future__ import annotations

from liqpanel.panel.build import (
    AUDIT_RULES, KEY, asof_characteristics, audit_summary, build_panel, characteristics_audit, check_overlap,
    coverage, monthly_from_daily, next_month_returns, read_characteristics, read_monthly_returns, transform_panel,
    with_delisting,
)

__all__ = [
    "AUDIT_RULES", "KEY", "asof_characteristics", "audit_summary", "build_panel", "characteristics_audit",
    "check_overlap", "coverage", "monthly_from_daily", "next_month_returns", "read_characteristics",
    "read_monthly_returns", "transform_panel", "with_delisting",
]
