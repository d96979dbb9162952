"""The demo config as a template for tests that bring one market's data of their own.

The committed demo (``config/config.yaml``, ``config/daily_example.yaml``)
holds two invented markets; a test that replaces the inputs with a small
simulated one-market set takes the same settings on one market.
"""

from __future__ import annotations

import copy

SHARES_MEASURES = ("turnover", "liu_lm")  # they need shares_out from a characteristics entry


def one_market(config: dict, market: str = "demo") -> dict:
    """``config`` (a loaded demo config) on the single market ``market``: no ``markets:``, no FX or
    securities input, no per-market breakpoints, and the shares-outstanding measures left out unless a
    characteristics entry lists ``shares_out``."""
    out = copy.deepcopy(config)
    out.pop("markets", None)
    out["market"] = market
    for key in ("fx", "securities"):
        (out.get("inputs") or {}).pop(key, None)
    models = out.get("models") or {}
    for spec in [*(models.get("sorts") or []), models.get("factor") or {}]:
        spec.pop("breakpoints", None)
    chars = (out.get("inputs") or {}).get("characteristics") or []
    if not any("shares_out" in (c.get("variables") or []) for c in chars):
        for name in SHARES_MEASURES:
            (out.get("measures") or {}).pop(name, None)
    return out
