"""Which estimator can be trusted in a given market: a simulation study calibrated to its data.

Every low-frequency spread estimator is biased in a way that depends on the
ratio of the spread to daily volatility, on how often the security trades
and on the window length. This module measures those biases under the
conditions of the user's own market:

1. Calibration (``calibrate``): from the daily table, one row per
   security-month with the window length (the market's trading days in the
   month within the security's listed span), the share of those days
   without a trade, the mean number of trades per day, the daily volatility
   (a range estimator of the library, ``vol_yang_zhang`` by default), the
   mean daily dollar volume, the median close and a spread level: the
   month's high-frequency effective spread when the monthly table has that
   column, else a low-frequency proxy of the library (``edge_spread`` by
   default) taken as the security's median over its months (convention of
   this project: a single month's proxy is too noisy to serve as a level).
   Security-months that cannot be calibrated are dropped by a named rule
   and counted in the audit.
2. Draws (``draw_conditions``): security-months resampled with replacement
   from the calibrated rows, so the study samples the joint distribution of
   spread, volatility, trading intensity and window length as the market
   has it.
3. Simulation (``simulate_draws``): each draw becomes one independent
   security-month of the Roll (1984) model traded intraday by
   ``liqpanel.simulate.simulate_security_months`` (known half-spread c =
   spread / 2, daily efficient volatility, Poisson trades per day), on the
   market's time zone, session and tick size, turned into the daily table by
   ``liqpanel.bars.daily_bars``. One extra business day before the window
   gives its first day a return, as a month inside a longer sample has.
4. Estimation: every registered spread and volatility measure that daily
   bars support (``estimator_selection``), with the options of the user's
   ``measures:`` section where it names the measure, run by
   ``liqpanel.measures.compute_monthly`` exactly as in the workflow.
5. Evaluation (``evaluate``): per estimator, overall and by bins of the true
   spread / volatility ratio and of the true trades per day: mean and median
   bias, bias relative to the mean truth, RMSE, correlation with the truth
   across security-months, the share of missing estimates and, for an
   estimator with an interval (the Gibbs sampler), the share of intervals
   that contain the truth.

Truth. The true spread of a security-month is the mean over its trades of
ln(ask / bid) (equal to 2c without a tick; with a tick the quotes are
rounded outwards, so it is at least 2c). The spread estimators work in log
prices, so their target is this log spread (0.01 = 1% of the price). The
true volatility is the daily standard deviation of the efficient log price;
estimators of the trading hours only (Parkinson, Garman-Klass,
Rogers-Satchell) are compared with sqrt(1 - overnight share) times it.

Assumptions of the study (the simulator's): the Roll model holds (trades at
the bid or the ask with equal probability, independent of a Brownian
efficient price), the spread and volatility are constant within the month,
trades arrive as a Poisson process, there is no market factor. Results are
measured on simulated data under these assumptions; they describe the
estimators, not the market.

Reproducible: one seed drives the draws and the simulation; the Gibbs
sampler keeps its own seed option; outputs are sorted.
"""

from __future__ import annotations

from liqpanel.study.blend import Blend, blend_weights, fit_blend
from liqpanel.study.calibration import calibrate, describe_conditions
from liqpanel.study.draws import Market, draw_conditions, simulate_draws
from liqpanel.study.evaluation import Estimate, add_bins, estimates_of, long_estimates, ranking, summarise
from liqpanel.study.maps import bias_maps, unestimated
from liqpanel.study.run import StudyResult, run_study
from liqpanel.study.defaults import (DEFAULTS, KEY, KINDS, WARM_UP_MONTH, WINDOW_MONTH, check_settings,
                                     estimator_selection, settings)
from liqpanel.study.summary import StudyTable, result_tables, summary_text

__all__ = [
    "Blend", "DEFAULTS", "Estimate", "KEY", "KINDS", "Market", "StudyResult", "StudyTable", "WARM_UP_MONTH",
    "WINDOW_MONTH", "add_bins", "bias_maps", "blend_weights", "calibrate", "check_settings", "describe_conditions",
    "draw_conditions", "estimates_of", "estimator_selection", "fit_blend", "long_estimates", "ranking",
    "result_tables", "run_study", "settings", "simulate_draws", "summarise", "summary_text", "unestimated",
]
