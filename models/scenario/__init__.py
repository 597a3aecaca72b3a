"""A seeded, invented online tea shop with known true demand parameters.

The scenario serves the demo and the recover-the-truth tests: every number is drawn
from a documented data-generating process, and the true parameters are returned next
to the data so that an estimate can be compared with the value it should find.

Data-generating process
-----------------------
Each product has a linear predictor

    eta = intercept + price_coef * f(price) + sum_c coef_c * g_c(x_c) + sum_k cross_k * f(price_k)

where ``f`` is ``ln`` for the ``log-log`` and ``poisson`` forms and the identity for
``semi-log`` and ``linear``; ``g_c`` is ``ln`` for the covariates named in
``TrueDemand.log_covariates`` (``rival_price`` and ``ad_spend``) and the identity for the
0/1 flags (``promo``, ``holiday``). Cross prices always enter like the own price.

Demand given the predictor, with ``u`` a standard normal draw per period:

* ``log-log`` and ``semi-log``: ``exp(eta + noise_sd * u)`` (multiplicative lognormal noise;
  ``exp(eta)`` is the median, ``exp(eta + noise_sd**2 / 2)`` the mean);
* ``linear``: ``eta + noise_sd * u`` (additive normal noise in units), floored at zero;
  the parameters used here keep the mean many noise standard deviations above zero,
  so the floor does not bind in practice;
* ``poisson``: a Poisson count with mean ``exp(eta)`` (``noise_sd`` is 0).

Covariates
----------
``rival_price``
    A shop-wide index of rival shelf prices, around 1.0 with a slow drift and weekly
    noise; enters in logs, so its coefficient is an elasticity (positive).
``promo``
    1 in a product's promotion weeks. A promotion lowers the shelf price by 10-25% and
    also lifts demand beyond the price cut (newsletter feature); the flag's coefficient
    is that extra lift (positive; log points for the log forms, units for ``linear``).
``ad_spend``
    Money spent per week on advertising the product's family (always > 0: an always-on
    budget plus campaign bursts); enters as ``ln(ad_spend)``, so its coefficient is an
    elasticity (positive, small).
``holiday``
    1 in gift weeks: weeks starting on a Monday from 14 December onwards and the spring
    gift week (the week starting on the Monday between 6 and 12 May); positive lift,
    largest for gift sets.

Prices and costs
----------------
Unit cost drifts slowly (a random walk plus occasional supplier steps) around 40-60% of
the base price. The regular (list) price follows cost with a pass-through between 0.4
and 0.9 in logs and has occasional list-price changes; the shelf price is the regular
price less any promotion discount, times a small voucher-mix noise, rounded to cents.
Cost moves are independent of demand shocks, so unit cost is a valid instrument for
price. Demand is generated from the recorded (rounded) prices and covariates, so a
regression on the recorded data is exactly specified.

The catalogue records whole units: the log and linear forms are rounded to the nearest
integer, with volumes kept high enough (at least 20 a week at the base point) that the
rounding does not visibly bias the estimates. Stockout weeks are supply-driven (late
deliveries), drawn independently of demand; in such weeks the shop sells only a random
15-85% share of demand, so excluding them leaves the estimates unbiased.
:func:`simulate_product` records unrounded units unless asked (Poisson counts are whole).

The catalogue
-------------
Products are spread evenly over five families and numbered family by family; the layout
does not depend on the seed. Forms follow a fixed cycle: with 40 products, 26 ``log-log``,
5 ``semi-log``, 4 ``linear`` and 5 ``poisson``. Ranges the seed draws from (effects at
the base point; the form's own coefficients are derived from them):

* elasticity: -3.5 to -1.2 (``linear``: -2.0 to -1.2; ``semi-log``: -3.0 to -1.2);
* base price 4-40 by family; unit cost 40-60% of it; base units 25-300 a week for the log
  forms (gift sets 20-60, oolongs up to 120), 80-250 for ``linear``, 0.8-3 for the
  low-volume ``poisson`` products, which supply the zero-sale weeks;
* rival-price elasticity 0.3 to 1.2; promotion lift 0.08 to 0.30; ad-spend elasticity
  0.03 to 0.15; holiday lift 0.05 to 0.35 (gift sets 0.5 to 1.0);
* log noise sd 0.10 to 0.25; ``linear`` noise sd 6-12% of base units;
* cross-price elasticities 0.15 to 0.6 (substitutes) for 1-2 siblings each; the matcha
  tin and the matcha whisk are complements of each other (-0.4 to -0.2);
* promotions in 6-14% of weeks (at least three); stockouts in 3-8% of the weeks of about
  a third of the products.

Traps
-----
Three catalogue products are built to fail quality gates; ``TrueDemand.trap`` names them:

``"flat-price"``
    The everyday breakfast tin kept one list price for two years and was never
    discounted (its promotion weeks are newsletter features without a price cut); two
    voucher weeks 2% below list are its only price movement, so the own-price effect is
    not identified (coefficient of variation of price well under 1%).
``"short-history"``
    A newly launched oolong with only the last 8 weeks in its history: too few
    observations for the number of terms.
``"endogenous-price"``
    A limited first-flush green tea whose price the shop raised in weeks when demand ran
    hot: the log price moves by ``endogeneity`` (0.1) times the standardised demand
    shock (log noise sd 0.35, true elasticity -1.5 to -1.2). Ordinary least squares on
    the correctly specified equation gives a wrong-signed, significantly positive
    own-price estimate. Its cost follows five alternating supplier steps of 12-16% with
    full pass-through, so two-stage least squares with ``ln(unit_cost)`` as the
    instrument for ``ln(price)`` has a strong first stage and recovers a negative
    elasticity.

Examples
--------
>>> cat = generate_catalogue(7)
>>> len(cat.products), cat.families[0], cat.periods[0]
(40, 'green', np.datetime64('2024-01-01'))
>>> [p.truth.trap for p in cat.products if p.truth.trap is not None]
['endogenous-price', 'flat-price', 'short-history']
"""

from models.scenario.catalogue import (
    FAMILIES,
    MAX_PRODUCTS,
    MIN_PRODUCTS,
    SHORT_HISTORY_PERIODS,
    generate_catalogue,
)
from models.scenario.drivers import holiday_flags, weekly_periods
from models.scenario.products import CURRENCY, Catalogue, ScenarioProduct
from models.scenario.simulate import simulate_product
from models.scenario.truth import (
    COVARIATES,
    LOG_COVARIATES,
    DemandForm,
    NoiseModel,
    Trap,
    TrueDemand,
)

__all__ = [
    "COVARIATES",
    "CURRENCY",
    "Catalogue",
    "DemandForm",
    "FAMILIES",
    "LOG_COVARIATES",
    "MAX_PRODUCTS",
    "MIN_PRODUCTS",
    "NoiseModel",
    "SHORT_HISTORY_PERIODS",
    "ScenarioProduct",
    "Trap",
    "TrueDemand",
    "generate_catalogue",
    "holiday_flags",
    "simulate_product",
    "weekly_periods",
]

# The examples of the objects above live in the submodules' docstrings; listing them
# here lets ``doctest.testmod(models.scenario)`` run them with the package's names.
__test__ = {
    "TrueDemand": TrueDemand,
    "TrueDemand.linear_predictor": TrueDemand.linear_predictor,
    "TrueDemand.expected_units": TrueDemand.expected_units,
    "TrueDemand.own_price_elasticity": TrueDemand.own_price_elasticity,
    "ScenarioProduct": ScenarioProduct,
    "Catalogue": Catalogue,
    "weekly_periods": weekly_periods,
    "holiday_flags": holiday_flags,
    "simulate_product": simulate_product,
    "generate_catalogue": generate_catalogue,
}
