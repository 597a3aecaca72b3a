"""The invented tea shop: products in five families, :func:`generate_catalogue`."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from models._typing import DateArray, FloatArray
from models.history import History
from models.scenario.drivers import (
    PricePaths,
    ad_spend,
    holiday_flags,
    log_cost_deviation,
    price_paths,
    promo_weeks,
    rival_index,
    volatile_log_cost,
    weekly_periods,
)
from models.scenario.products import CURRENCY, Catalogue, ScenarioProduct, repricing_bounds
from models.scenario.truth import DemandForm, Trap, censor, draw_demand, native_truth

FAMILIES: tuple[str, ...] = ("green", "black", "oolong", "herbal", "gift-sets")
MIN_PRODUCTS = 15
MAX_PRODUCTS = 100
SHORT_HISTORY_PERIODS = 8

_NAMES: dict[str, tuple[str, ...]] = {
    "green": (
        "First Flush Sencha tin 50 g",
        "Ceremonial Matcha tin 30 g",
        "Bamboo matcha whisk",
        "Jasmine Pearl tin 100 g",
        "Gunpowder Mint tin 125 g",
        "Genmaicha Toasted Rice tin 100 g",
        "Dragon Well Spring tin 50 g",
        "Hojicha Ember tin 80 g",
        "Lemon Leaf Green tin 100 g",
        "Bancha Everyday tin 200 g",
    ),
    "black": (
        "Harbour Breakfast tin 250 g",
        "Assam Copper tin 125 g",
        "Bergamot Grey tin 100 g",
        "Darjeeling Second Flush tin 100 g",
        "Smoky Pine Souchong tin 100 g",
        "Ceylon Highlands tin 125 g",
        "Masala Chai Spice tin 150 g",
        "Yunnan Golden Tips tin 50 g",
        "Vanilla Fireside tin 100 g",
        "Keemun Rose tin 100 g",
    ),
    "oolong": (
        "Mountain Mist Oolong tin 75 g",
        "Milk Oolong tin 100 g",
        "Iron Goddess tin 100 g",
        "Oriental Beauty tin 50 g",
        "Roasted Cliff Oolong tin 50 g",
        "Honey Orchid Dancong tin 50 g",
        "White Peach Oolong tin 100 g",
        "Osmanthus Oolong tin 75 g",
        "High Mountain Frost tin 50 g",
        "Charcoal Roast Oolong tin 75 g",
    ),
    "herbal": (
        "Chamomile Calm tin 60 g",
        "Peppermint Fresh tin 75 g",
        "Rooibos Vanilla tin 125 g",
        "Hibiscus Berry tin 100 g",
        "Lemon Ginger tin 100 g",
        "Lavender Evening tin 60 g",
        "Turmeric Glow tin 100 g",
        "Fennel Hearth tin 80 g",
        "Honeybush Orange tin 100 g",
        "Nettle Garden tin 60 g",
    ),
    "gift-sets": (
        "Four Seasons sampler (4 tins)",
        "Tea-for-one porcelain set",
        "Advent calendar (24 sachets)",
        "Explorer gift box (6 tins)",
        "Oolong tasting flight (3 tins)",
        "Cast-iron teapot gift set",
        "Green tea discovery box (5 tins)",
        "Herbal comfort hamper",
        "Breakfast duo gift tin",
        "Glass teapot starter set",
    ),
}
_PRICE_RANGE = {
    "green": (6.0, 24.0),
    "black": (4.0, 14.0),
    "oolong": (10.0, 40.0),
    "herbal": (4.0, 12.0),
    "gift-sets": (18.0, 40.0),
}
# Seed-independent layout: which slot holds which special product.
_TRAP_SLOTS: dict[tuple[str, int], Trap] = {
    ("green", 0): "endogenous-price",
    ("black", 0): "flat-price",
    ("oolong", 0): "short-history",
}
_MATCHA, _WHISK = ("green", 1), ("green", 2)
_FORM_CYCLE: tuple[DemandForm, ...] = (
    "log-log",
    "semi-log",
    "log-log",
    "linear",
    "log-log",
    "poisson",
    "log-log",
    "log-log",
)


@dataclass(frozen=True)
class _Slot:
    sku: str
    name: str
    family: str
    index: int
    form: DemandForm
    trap: Trap | None


def _layout(n_products: int) -> list[_Slot]:
    counts = [n_products // len(FAMILIES)] * len(FAMILIES)
    for i in range(n_products % len(FAMILIES)):
        counts[i] += 1
    slots: list[_Slot] = []
    cycle_position = 0
    for family, count in zip(FAMILIES, counts, strict=True):
        pool = _NAMES[family]
        for index in range(count):
            name = pool[index % len(pool)]
            if index >= len(pool):
                name = f"{name} refill pouch" + ("" if index < 2 * len(pool) else f" {index}")
            trap = _TRAP_SLOTS.get((family, index))
            form: DemandForm
            if trap is not None or (family, index) == _MATCHA:
                form = "log-log"
            elif (family, index) == _WHISK:
                form = "poisson"
            else:
                form = _FORM_CYCLE[cycle_position % len(_FORM_CYCLE)]
                cycle_position += 1
            sku = f"TEA-{len(slots) + 1:03d}"
            slots.append(_Slot(sku, name, family, index, form, trap))
    return slots


@dataclass(frozen=True)
class _Draft:
    """A product whose prices exist but whose demand waits for its siblings' prices."""

    slot: _Slot
    rng: np.random.Generator
    base_price: float
    promo: FloatArray
    shock: FloatArray
    prices: PricePaths
    shelf: FloatArray


def _base_price(rng: np.random.Generator, slot: _Slot) -> float:
    if (slot.family, slot.index) == _MATCHA:
        low, high = 20.0, 32.0
    elif (slot.family, slot.index) == _WHISK:
        low, high = 12.0, 20.0
    else:
        low, high = _PRICE_RANGE[slot.family]
    return round(float(rng.uniform(low, high)), 2)


def _draft(slot: _Slot, rng: np.random.Generator, n: int, endogeneity: float) -> _Draft:
    base_price = _base_price(rng, slot)
    promo = promo_weeks(rng, n, float(rng.uniform(0.06, 0.14)), minimum=3)
    shock = rng.standard_normal(n)
    options: dict[str, float] = {
        "pass_through": float(rng.uniform(0.4, 0.9)),
        "list_changes": 1.2,
        "price_noise": 0.015,
    }
    if slot.trap == "endogenous-price":
        # Cost steps (with promotions) are the only exogenous price movers, and strong
        # ones, so the demand-driven moves dominate OLS while IV on cost still works.
        options = {"pass_through": 1.0, "list_changes": 0.0, "price_noise": 0.0}
    elif slot.trap == "flat-price":
        options = {"pass_through": 0.0, "list_changes": 0.0, "price_noise": 0.0}
    prices = price_paths(
        rng,
        n,
        base_price=base_price,
        cost_share=float(rng.uniform(0.40, 0.60)),
        promo=promo,
        discount_promos=slot.trap != "flat-price",
        log_cost=(
            volatile_log_cost(rng, n)
            if slot.trap == "endogenous-price"
            else log_cost_deviation(rng, n)
        ),
        **options,
    )
    shelf = prices.shelf
    if slot.trap == "endogenous-price":
        shelf = shelf * np.exp(endogeneity * shock)
    elif slot.trap == "flat-price":
        voucher_weeks = rng.choice(np.flatnonzero(promo == 0), 2, replace=False)
        shelf = shelf.copy()
        shelf[voucher_weeks] *= 0.98
    return _Draft(slot, rng, base_price, promo, shock, prices, np.round(shelf, 2))


def _base_units(rng: np.random.Generator, slot: _Slot) -> float:
    if slot.form == "poisson":
        return float(rng.uniform(0.8, 3.0))
    if slot.form == "linear":
        return float(rng.uniform(80.0, 250.0))
    low, high = (20.0, 60.0) if slot.family == "gift-sets" else (25.0, 300.0)
    if slot.family == "oolong":
        high = 120.0
    return float(np.exp(rng.uniform(np.log(low), np.log(high))))


def _cross_effects(draft: _Draft, siblings: list[_Draft]) -> dict[str, float]:
    slot, rng = draft.slot, draft.rng
    place = (slot.family, slot.index)
    drivers = [s for s in siblings if s.slot.trap is None and s.slot.sku != slot.sku]
    effects: dict[str, float] = {}
    if place in (_MATCHA, _WHISK):
        partner = _WHISK if place == _MATCHA else _MATCHA
        for s in drivers:
            if (s.slot.family, s.slot.index) == partner:
                # The complement pair: a dearer whisk sells less matcha, and back.
                effects[s.slot.sku] = -float(rng.uniform(0.2, 0.4))
        drivers = [s for s in drivers if (s.slot.family, s.slot.index) not in (_MATCHA, _WHISK)]
    wanted = int(rng.integers(1, 3)) - len(effects)
    if wanted > 0 and drivers:
        chosen = rng.choice(len(drivers), min(wanted, len(drivers)), replace=False)
        top = 0.4 if slot.form == "linear" else 0.6
        for i in sorted(int(c) for c in chosen):
            effects[drivers[i].slot.sku] = float(rng.uniform(0.15, top))
    return effects


def _finish(
    draft: _Draft,
    siblings: list[_Draft],
    *,
    covariates: dict[str, FloatArray],
    ad_budget: float,
    periods: DateArray,
    endogeneity: float,
) -> ScenarioProduct:
    slot, rng = draft.slot, draft.rng
    n = periods.shape[0]
    cross_effects = _cross_effects(draft, siblings)
    by_sku = {s.slot.sku: s for s in siblings}
    if slot.form == "linear":
        elasticity = float(rng.uniform(-2.0, -1.2))
    elif slot.form == "semi-log":
        elasticity = float(rng.uniform(-3.0, -1.2))
    elif slot.trap == "endogenous-price":
        elasticity = float(rng.uniform(-1.5, -1.2))
    else:
        elasticity = float(rng.uniform(-3.5, -1.2))
    holiday_range = (0.5, 1.0) if slot.family == "gift-sets" else (0.05, 0.35)
    if slot.form == "linear":
        noise_sd = float(rng.uniform(0.06, 0.12))
    elif slot.form == "poisson":
        noise_sd = 0.0
    else:
        noise_sd = 0.35 if slot.trap == "endogenous-price" else float(rng.uniform(0.10, 0.25))
    base_units = _base_units(rng, slot)
    truth = native_truth(
        form=slot.form,
        elasticity=elasticity,
        base_price=draft.base_price,
        base_units=base_units,
        effects={
            "rival_price": float(rng.uniform(0.3, 1.2)),
            "promo": float(rng.uniform(0.08, 0.30)),
            "ad_spend": float(rng.uniform(0.03, 0.15)),
            "holiday": float(rng.uniform(*holiday_range)),
        },
        reference={"rival_price": 1.0, "promo": 0.0, "ad_spend": ad_budget, "holiday": 0.0},
        cross_effects=cross_effects,
        cross_reference={k: by_sku[k].base_price for k in cross_effects},
        noise_sd=noise_sd * (base_units if slot.form == "linear" else 1.0),
        trap=slot.trap,
        endogeneity=endogeneity if slot.trap == "endogenous-price" else 0.0,
    )
    cross_prices = {k: by_sku[k].shelf for k in cross_effects}
    eta = truth.linear_predictor(draft.shelf, covariates=covariates, cross_prices=cross_prices)
    demand = np.maximum(np.rint(draw_demand(truth, eta, draft.shock, rng)), 0.0)
    has_stockouts = slot.trap is None and rng.random() < 0.35
    stockout_rate = float(rng.uniform(0.03, 0.08)) if has_stockouts else 0.0
    units, in_stock = censor(rng, demand, stockout_rate=stockout_rate, whole_units=True)
    mean_units = truth.expected_units(draft.shelf, covariates=covariates, cross_prices=cross_prices)
    keep = slice(n - SHORT_HISTORY_PERIODS if slot.trap == "short-history" else 0, n)
    history = History(
        sku=slot.sku,
        periods=periods[keep],
        price=draft.shelf[keep],
        units=units[keep],
        unit_cost=draft.prices.cost[keep],
        in_stock=in_stock[keep],
        covariates={k: v[keep] for k, v in covariates.items()},
        cross_prices={k: v[keep] for k, v in cross_prices.items()},
    )
    current = float(draft.prices.regular[-1])
    latest_cost = float(draft.prices.cost[-1])
    low, high = repricing_bounds(current, latest_cost)
    return ScenarioProduct(
        sku=slot.sku,
        name=slot.name,
        family=slot.family,
        currency=CURRENCY,
        current_price=current,
        unit_cost=latest_cost,
        min_price=low,
        max_price=high,
        history=history,
        truth=truth,
        regular_price=draft.prices.regular[keep],
        demand=demand[keep],
        mean_units=mean_units[keep],
    )


def generate_catalogue(
    seed: int = 7,
    *,
    n_products: int = 40,
    n_periods: int = 104,
    start: str = "2024-01-01",
) -> Catalogue:
    """Generate the invented tea shop: products in five families with weekly histories.

    Products are spread evenly over :data:`FAMILIES` and numbered ``TEA-001``,
    ``TEA-002``, ... family by family. The layout is fixed (which slot has which form,
    which products are traps, the matcha/whisk complement pair); the seed draws every
    number. Forms: mostly ``log-log``, with ``semi-log``, ``linear`` and low-volume
    ``poisson`` products (the source of zero-sale weeks). Each product's demand responds
    to the prices of 1-2 siblings in its family; trap products never drive a sibling.

    Parameters
    ----------
    seed : int
        Seed for ``numpy.random.SeedSequence``; the same seed gives identical arrays.
    n_products : int
        Number of products, 15 to 100 (at least three per family).
    n_periods : int
        Number of weekly periods, at least 16.
    start : str
        ISO date of the first period; must be a Monday.

    Returns
    -------
    Catalogue
        Products with their histories and true demand equations.

    Examples
    --------
    >>> cat = generate_catalogue(11, n_products=20, n_periods=52)
    >>> len(cat.products), cat.periods.shape
    (20, (52,))
    >>> cat.product("TEA-002").truth.cross_price_coefs["TEA-003"] < 0  # matcha and whisk
    True
    """
    if not MIN_PRODUCTS <= n_products <= MAX_PRODUCTS:
        raise ValueError(f"n_products must be between {MIN_PRODUCTS} and {MAX_PRODUCTS}")
    if n_periods < 2 * SHORT_HISTORY_PERIODS:
        raise ValueError(f"n_periods must be at least {2 * SHORT_HISTORY_PERIODS}")
    periods = weekly_periods(start, n_periods)
    n = n_periods
    shop_seq, *product_seqs = np.random.SeedSequence(seed).spawn(1 + n_products)
    shop = np.random.default_rng(shop_seq)
    holiday = holiday_flags(periods)
    rival = rival_index(shop, n)
    budgets = {family: round(float(shop.uniform(150.0, 600.0)), 2) for family in FAMILIES}
    ad_by_family = {f: ad_spend(shop, n, holiday, budget=b) for f, b in budgets.items()}
    endogeneity = 0.1
    drafts = [
        _draft(slot, np.random.default_rng(seq), n, endogeneity)
        for slot, seq in zip(_layout(n_products), product_seqs, strict=True)
    ]
    products = []
    for draft in drafts:
        family = draft.slot.family
        covariates = {
            "rival_price": rival,
            "promo": draft.promo,
            "ad_spend": ad_by_family[family],
            "holiday": holiday,
        }
        siblings = [d for d in drafts if d.slot.family == family]
        products.append(
            _finish(
                draft,
                siblings,
                covariates=covariates,
                ad_budget=budgets[family],
                periods=periods,
                endogeneity=endogeneity,
            )
        )
    return Catalogue(seed=seed, periods=periods, families=FAMILIES, products=tuple(products))
