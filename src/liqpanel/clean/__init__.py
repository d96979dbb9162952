"""The clean stage: raw trades and quotes in, clean tables and an audit out.

Every row read ends in exactly one place: kept, or dropped by the first
named rule it breaks. Trades, in this order:

- ``unparseable``: a timestamp, price or size present in the file that does
  not parse (only with ``clean.unparseable: drop``; the default stops the
  run with an error naming the file, column, row and value)
- ``missing_field``: security, timestamp, price or size missing (common practice)
- ``outside_sample``: local date before the first or after the last month of
  the sample (these rows are accounted in the first/last partition)
- ``nonpositive``: price <= 0 or size <= 0 (common practice; Barndorff-Nielsen,
  Hansen, Lunde & Shephard 2009, rule P2, for zero prices)
- ``outside_session``: local time outside every session of the market
  profile, half days honoured (BNHLS 2009, rule P1); with a trading
  calendar (``calendar`` or ``holidays`` in the profile) every time of a
  closed day is outside (``liqpanel.markets.for_sample``)
- ``excluded_venue``: a venue not in ``clean.venues`` (BNHLS 2009, rule P3)
- ``correction``: a correction indicator that ``clean.corrections`` maps
  to drop (BNHLS 2009, rule T1)
- ``excluded_condition``: a sale condition that ``clean.conditions`` maps to
  drop (BNHLS 2009, rule T2)
- ``duplicate``: an exact copy of an earlier record (common practice)
- ``merged_same_time``: several trades of a security with the same
  timestamp are merged into the first of them, with the median price and the
  summed size (BNHLS 2009, rule T3; summing sizes keeps the volume); the
  others are counted here
- ``outside_quotes``: price above ask + spread or below bid - spread of the
  prevailing quote (BNHLS 2009, rule T4)
- ``no_quote``: no prevailing quote that day (only with
  ``clean.unquoted_trades: drop``; by default such trades are kept and
  counted in the audit column ``kept_without_quote``)
- ``outlier``: the neighbourhood filter of Brownlees & Gallo (2006), see
  ``liqpanel.clean.outliers``

Quotes: ``unparseable``, ``missing_field`` (security, timestamp, bid, ask),
``outside_sample``, ``nonpositive`` (bid or ask <= 0, BNHLS P2),
``outside_session``, ``excluded_venue``, ``duplicate``, ``crossed_quote``
(ask <= bid; BNHLS 2009, rule Q2 drops ask < bid, a locked quote ask = bid is
dropped too), ``merged_same_time`` (median bid, median ask and median sizes;
BNHLS 2009, rule Q1), ``wide_spread`` (spread above ``clean.quotes.wide_spread``
times the security-day's median spread; BNHLS 2009, rule Q3, 50 times).
Crossed quotes are removed before same-time quotes are merged, so that a
crossed entry does not enter a median (convention of this project).

The BNHLS rule letters and the value 50 are quoted from memory from
Barndorff-Nielsen, O. E., P. R. Hansen, A. Lunde and N. Shephard (2009),
"Realized kernels in practice: trades and quotes", Econometrics Journal 12,
C1-C32.

The audit has one row per table, security and local date with
``rows_read``, ``rows_kept`` and ``drop_<rule>`` for every rule of both
tables (zero where a rule does not apply); kept + dropped = read.
Unsorted input is fine: rows are ordered by security, timestamp and their
position in the input before any rule that depends on order.
"""

from __future__ import annotations

from liqpanel.clean.audit import audit_of, check_conservation, clean_quotes, clean_trades, kept_rows
from liqpanel.clean.flags import flag_quotes, flag_trades
from liqpanel.clean.rules import (
    MISSING_SECURITY, QUOTE_COLUMNS, QUOTE_RULES, RULES, RULES_OF, TRADE_COLUMNS, TRADE_RULES,
    month_number, months_of,
)

__all__ = [
    "MISSING_SECURITY",
    "QUOTE_COLUMNS",
    "QUOTE_RULES",
    "RULES",
    "RULES_OF",
    "TRADE_COLUMNS",
    "TRADE_RULES",
    "audit_of",
    "check_conservation",
    "clean_quotes",
    "clean_trades",
    "flag_quotes",
    "flag_trades",
    "kept_rows",
    "month_number",
    "months_of",
]
