"""Registration of every measure: spreads, volatility, zero returns, turnover, Amihud, gamma.

Each entry names its function, outputs, the daily columns it needs, the
published source, the family, the minimum number of observations (``n_obs``)
below which the measures stage reports a missing value, and the default
options. For measures built from pairs of consecutive days (Corwin-Schultz,
Abdi-Ranaldo, EDGE, Yang-Zhang, Pastor-Stambaugh) ``n_obs`` counts the pairs,
so a month needs one trading day more than the minimum.
"""

from __future__ import annotations

from liqpanel.measures.activity import amihud_illiquidity, amihud_plan, amivest_liquidity, amivest_plan
from liqpanel.measures.closing import closing_spread, closing_spread_plan
from liqpanel.measures.edge import edge_plan, edge_spread
from liqpanel.measures.gibbs import DEFAULT_PRIOR
from liqpanel.measures.gibbs_months import gibbs_spread
from liqpanel.measures.highlow import (
    abdi_ranaldo_monthly_plan,
    abdi_ranaldo_monthly_spread,
    abdi_ranaldo_two_day_plan,
    abdi_ranaldo_two_day_spread,
    corwin_schultz_plan,
    corwin_schultz_spread,
)
from liqpanel.measures.impact import (
    pastor_stambaugh_gamma,
    pastor_stambaugh_plan,
    turnover,
    turnover_plan,
    zero_return_share,
    zero_return_share_plan,
    zero_return_share_traded,
    zero_return_share_traded_plan,
)
from liqpanel.measures.liu import LM1_DEFLATOR, liu_lm, liu_plan
from liqpanel.measures.lot import lot_mixed, lot_ysplit
from liqpanel.measures.registry import Measure, register
from liqpanel.measures.roll import roll_spread, roll_spread_plan
from liqpanel.measures.limits import limit_days, limit_days_plan
from liqpanel.measures.ticks import DECIMAL_MULTIPLES, effective_tick, effective_tick_plan
from liqpanel.measures.volatility import (
    close_to_close_plan,
    close_to_close_volatility,
    garman_klass_plan,
    garman_klass_volatility,
    parkinson_plan,
    parkinson_volatility,
    rogers_satchell_plan,
    rogers_satchell_volatility,
    yang_zhang_plan,
    yang_zhang_volatility,
)
from liqpanel.measures.zeros import fht_plan, fht_spread

MIN_DAYS = 15  # common practice for monthly estimates from daily data
VOLATILITY_OPTIONS = {"annualise": False, "trading_days": 252}
OHLC = ("open", "high", "low", "close")


def _volatility(name, function, plan, columns, source, description) -> Measure:
    """A volatility measure: one output named like the measure, the shared options and minimum."""
    return Measure(
        name=name, function=function, plan=plan, outputs=(name,), columns=columns, source=source,
        family="volatility", min_days=MIN_DAYS, options=dict(VOLATILITY_OPTIONS), description=description,
    )


MEASURES = (
    Measure(
        name="roll_spread",
        function=roll_spread,
        plan=roll_spread_plan,
        outputs=("roll_spread", "roll_efficient_var"),
        columns=("ret",),
        source="Roll (1984), Journal of Finance 39(4)",
        family="spread",
        min_days=MIN_DAYS,
        options={"series": "log_price", "convention": "missing"},
        description="2*sqrt(-cov(dp_t, dp_t-1)); implied efficient-price variance gamma0 + 2*gamma1",
    ),
    Measure(
        name="amihud",
        function=amihud_illiquidity,
        plan=amihud_plan,
        outputs=("amihud",),
        columns=("ret", "dollar_volume"),
        source="Amihud (2002), Journal of Financial Markets 5(1)",
        family="impact",
        min_days=MIN_DAYS,
        options={"scale": 1e6},
        description="mean |r| / dollar volume over days with volume, x 10^6",
    ),
    Measure(
        name="gibbs_spread",
        function=gibbs_spread,
        outputs=("gibbs_spread", "gibbs_spread_lo", "gibbs_spread_hi", "gibbs_sigma_u"),
        columns=("ret",),
        source="Hasbrouck (2004), Journal of Financial and Quantitative Analysis 39(2); "
        "Hasbrouck (2009), Journal of Finance 64(3)",
        family="spread",
        min_days=MIN_DAYS,
        options={
            "sweeps": 1000,
            "burn": 200,
            "seed": 1984,
            "prior": dict(DEFAULT_PRIOR),
            "use_market": False,
            "interval": 0.90,
        },
        description="Gibbs sampler for the Roll model: 2 x posterior mean of the half-spread, interval, sigma_u",
    ),
    Measure(
        name="cs_spread",
        function=corwin_schultz_spread,
        plan=corwin_schultz_plan,
        outputs=("cs_spread",),
        columns=("high", "low", "close"),
        source="Corwin & Schultz (2012), Journal of Finance 67(2)",
        family="spread",
        min_days=MIN_DAYS,
        options={"negative": "zero", "flat_days": "use"},
        description="high-low spread from two-day ranges with the overnight adjustment, monthly mean",
    ),
    Measure(
        name="ar_spread_2day",
        function=abdi_ranaldo_two_day_spread,
        plan=abdi_ranaldo_two_day_plan,
        outputs=("ar_spread_2day",),
        columns=("high", "low", "close"),
        source="Abdi & Ranaldo (2017), Review of Financial Studies 30(12)",
        family="spread",
        min_days=MIN_DAYS,
        options={"flat_days": "use"},
        description="close-high-low spread, mean of floored two-day square roots",
    ),
    Measure(
        name="ar_spread_monthly",
        function=abdi_ranaldo_monthly_spread,
        plan=abdi_ranaldo_monthly_plan,
        outputs=("ar_spread_monthly",),
        columns=("high", "low", "close"),
        source="Abdi & Ranaldo (2017), Review of Financial Studies 30(12)",
        family="spread",
        min_days=MIN_DAYS,
        options={"flat_days": "use"},
        description="close-high-low spread, square root of the floored monthly mean of two-day pieces",
    ),
    Measure(
        name="edge_spread",
        function=edge_spread,
        plan=edge_plan,
        outputs=("edge_spread",),
        columns=OHLC,
        source="Ardia, Guidotti & Kroencke (2024), Journal of Financial Economics 161",
        family="spread",
        min_days=MIN_DAYS,
        options={"signed": False, "flat_days": "use"},
        description="efficient open-high-low-close spread estimator (EDGE)",
    ),
    Measure(
        name="fht_spread",
        function=fht_spread,
        plan=fht_plan,
        outputs=("fht_spread", "fht_zero_share"),
        columns=("ret",),
        source="Fong, Holden & Trzcinka (2017), Review of Finance 21(4)",
        family="spread",
        min_days=MIN_DAYS,
        options={"calendar": "market"},
        description="2 sigma Phi^-1((1 + z) / 2) from the zero-return share z and the return volatility",
    ),
    *[
        Measure(
            name=f"lot_{form}",
            function=function,
            outputs=(f"lot_{form}", f"lot_{form}_converged", f"lot_{form}_iterations"),
            columns=("ret", "mkt_ret"),
            source="Lesmond, Ogden & Trzcinka (1999), Review of Financial Studies 12(5); "
            "Goyenko, Holden & Trzcinka (2009), Journal of Financial Economics 92(2)",
            family="spread",
            min_days=MIN_DAYS,
            options={"max_iterations": 200, "tolerance": 1e-8},
            description=f"LOT round-trip cost alpha2 - alpha1 by maximum likelihood, {label}; convergence per month",
        )
        for form, function, label in (
            ("mixed", lot_mixed, "regions by the sign of the market return"),
            ("ysplit", lot_ysplit, "regions by the sign of the security's return"),
        )
    ],
    Measure(
        name="effective_tick",
        function=effective_tick,
        plan=effective_tick_plan,
        outputs=("effective_tick",),
        columns=("close", "volume"),
        source="Holden (2009), Journal of Financial Markets 12(4); "
        "Goyenko, Holden & Trzcinka (2009), Journal of Financial Economics 92(2)",
        family="spread",
        min_days=MIN_DAYS,
        options={"tick_size": None, "multiples": list(DECIMAL_MULTIPLES)},
        description="spread implied by the clustering of closing prices on the tick grid (tick from the market profile)",
    ),
    Measure(
        name="closing_spread",
        function=closing_spread,
        plan=closing_spread_plan,
        outputs=("closing_spread",),
        columns=("close_bid", "close_ask"),
        source="Chung & Zhang (2014), Journal of Financial Markets 17; Fong, Holden & Trzcinka (2017)",
        family="spread",
        min_days=MIN_DAYS,
        options={"max_spread": 0.5},
        description="closing percent quoted spread (ask - bid) / midpoint, monthly mean of days",
    ),
    Measure(
        name="amivest",
        function=amivest_liquidity,
        plan=amivest_plan,
        outputs=("amivest",),
        columns=("ret", "dollar_volume"),
        source="Cooper, Groth & Avera (1985), Journal of Economics and Business 37(1); "
        "Goyenko, Holden & Trzcinka (2009)",
        family="impact",
        min_days=MIN_DAYS,
        options={"form": "mean_of_ratios", "unit": 1e6},
        description="Amivest liquidity ratio: dollar volume (millions) per unit absolute return, days with a price move",
    ),
    Measure(
        name="liu_lm",
        function=liu_lm,
        plan=liu_plan,
        outputs=("liu_lm1", "liu_zero_days", "liu_turnover", "liu_days"),
        columns=("volume", "shares_out"),
        source="Liu (2006), Journal of Financial Economics 82(3)",
        family="activity",
        min_days=1,  # defined from the calendar: a month without trades has 21 standardised zero-volume days
        options={"deflator": LM1_DEFLATOR, "calendar": "market"},
        description="LM1: standardised turnover-adjusted zero-volume days; LM12 summed over 12 months after the stage",
    ),
    _volatility("vol_close", close_to_close_volatility, close_to_close_plan, ("ret",),
                "common practice (sample standard deviation of daily log returns)",
                "close-to-close volatility of daily log returns"),
    _volatility("vol_parkinson", parkinson_volatility, parkinson_plan, ("high", "low"),
                "Parkinson (1980), Journal of Business 53(1)",
                "high-low range volatility, mean (h - l)^2 / (4 ln 2)"),
    _volatility("vol_garman_klass", garman_klass_volatility, garman_klass_plan, OHLC,
                "Garman & Klass (1980), Journal of Business 53(1)",
                "open-high-low-close volatility, trading hours"),
    _volatility("vol_rogers_satchell", rogers_satchell_volatility, rogers_satchell_plan, OHLC,
                "Rogers & Satchell (1991), Annals of Applied Probability 1(4)",
                "drift-independent range volatility, trading hours"),
    _volatility("vol_yang_zhang", yang_zhang_volatility, yang_zhang_plan, OHLC,
                "Yang & Zhang (2000), Journal of Business 73(3)",
                "drift-independent volatility with the overnight move, whole day"),
    Measure(
        name="zero_return_share",
        function=zero_return_share,
        plan=zero_return_share_plan,
        outputs=("zero_return_share",),
        columns=("ret", "volume"),
        source="Lesmond, Ogden & Trzcinka (1999), Review of Financial Studies 12(5)",
        family="activity",
        min_days=MIN_DAYS,
        options={"calendar": "market"},
        description="share of trading days with a zero return, days without trades included",
    ),
    Measure(
        name="zero_return_share_traded",
        function=zero_return_share_traded,
        plan=zero_return_share_traded_plan,
        outputs=("zero_return_share_traded",),
        columns=("ret", "volume"),
        source="Lesmond, Ogden & Trzcinka (1999), Review of Financial Studies 12(5); positive-volume variant",
        family="activity",
        min_days=MIN_DAYS,
        options={"calendar": "market"},
        description="share of trading days with a zero return and positive volume",
    ),
    Measure(
        name="turnover",
        function=turnover,
        plan=turnover_plan,
        outputs=("turnover",),
        columns=("volume", "shares_out"),
        source="common practice (month's volume / shares outstanding)",
        family="activity",
        min_days=1,  # a monthly total: defined whenever the security traded in the month
        options={},
        description="month's share volume divided by shares outstanding at the month's end",
    ),
    Measure(
        name="limit_days",
        function=limit_days,
        plan=limit_days_plan,
        outputs=("limit_days", "flat_days"),
        columns=("high", "low", "close", "limit_day"),
        source="common practice (counts of days at the daily price limit and of days with high = low)",
        family="activity",
        min_days=1,
        options={},
        description="days closing at the daily price limit and days whose high equals their low",
    ),
    Measure(
        name="ps_gamma",
        function=pastor_stambaugh_gamma,
        plan=pastor_stambaugh_plan,
        outputs=("ps_gamma",),
        columns=("ret", "mkt_ret", "dollar_volume"),
        source="Pastor & Stambaugh (2003), Journal of Political Economy 111(3)",
        family="impact",
        min_days=15,  # Pastor & Stambaugh (2003): at least 15 observations
        options={"dollar_volume_unit": 1e6},
        description="return-reversal gamma: OLS of next-day excess return on signed dollar volume",
    ),
)

for _measure in MEASURES:
    register(_measure)

__all__ = ["MEASURES"]
