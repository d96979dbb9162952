"""liqpanel: reproducible cross-sectional liquidity panels.

Raw trades (or daily bars) in; monthly spread, price-impact and volatility
measures, an analysis panel without look-ahead, regressions, portfolio sorts
and versioned tables out. Every stage is a plain function of this package;
the Snakemake workflow only wires files to them.
"""

__version__ = "0.1.0"
