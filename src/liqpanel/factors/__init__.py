"""Liquidity factors built from the analysis panel.

* :mod:`liqpanel.factors.aggregate` -- market-wide liquidity and its
  innovations (Pastor & Stambaugh 2003);
* :mod:`liqpanel.factors.betas` -- rolling liquidity betas, portfolios on
  them and the traded factor (Pastor & Stambaugh 2003);
* :mod:`liqpanel.factors.commonality` -- commonality in liquidity (Chordia,
  Roll & Subrahmanyam 2000);
* :mod:`liqpanel.factors.ols` -- many small regressions at once from sums
  of cross products;
* :mod:`liqpanel.factors.run` -- the stage: config section to tables and
  factor series.
"""
