"""What the scenario hands out: one invented product, and the whole invented shop."""

from __future__ import annotations

from dataclasses import dataclass

from models._typing import DateArray, FloatArray
from models.history import History
from models.scenario.truth import TrueDemand

CURRENCY = "EUR"


@dataclass(frozen=True, eq=False)
class ScenarioProduct:
    """One invented product: its catalogue entry, its sales history and its true demand.

    Parameters
    ----------
    sku, name, family, currency : str
        Catalogue fields (``currency`` is ISO 4217).
    current_price : float
        Regular (list) price in the last period.
    unit_cost : float
        Unit cost in the last period.
    min_price, max_price : float
        Default business bounds for repricing: no lower than 10% above cost or 25% below
        the current price, no higher than 35% above it.
    history : History
        What the shop recorded (whole units in the catalogue).
    truth : TrueDemand
        The equation the history was drawn from.
    regular_price : FloatArray
        List price per history period (the shelf price before promotions and vouchers).
    demand : FloatArray
        Units that would have sold with stock on hand (``history.units`` censors it in
        stockout weeks).
    mean_units : FloatArray
        True mean demand per history period (:meth:`TrueDemand.expected_units`).

    Examples
    --------
    >>> from models.scenario import simulate_product
    >>> product = simulate_product(3, elasticity=-2.5)
    >>> product.history.n_periods, product.truth.form
    (104, 'log-log')
    """

    sku: str
    name: str
    family: str
    currency: str
    current_price: float
    unit_cost: float
    min_price: float
    max_price: float
    history: History
    truth: TrueDemand
    regular_price: FloatArray
    demand: FloatArray
    mean_units: FloatArray


@dataclass(frozen=True, eq=False)
class Catalogue:
    """The whole invented shop: products, families, weekly periods and the seed.

    Examples
    --------
    >>> from models.scenario import generate_catalogue
    >>> cat = generate_catalogue(7)
    >>> len(cat.in_family("green")), cat.product("TEA-002").family
    (8, 'green')
    """

    seed: int
    periods: DateArray
    families: tuple[str, ...]
    products: tuple[ScenarioProduct, ...]

    def product(self, sku: str) -> ScenarioProduct:
        """The product with this sku (``KeyError`` if unknown)."""
        for product in self.products:
            if product.sku == sku:
                return product
        raise KeyError(sku)

    def in_family(self, family: str) -> tuple[ScenarioProduct, ...]:
        """The products of one family, in sku order."""
        return tuple(p for p in self.products if p.family == family)


def repricing_bounds(current_price: float, unit_cost: float) -> tuple[float, float]:
    """Default repricing bounds: see ``min_price`` and ``max_price`` of :class:`ScenarioProduct`."""
    low = round(max(1.10 * unit_cost, 0.75 * current_price), 2)
    return low, round(1.35 * current_price, 2)
