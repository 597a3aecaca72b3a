"""The sales history of one product, as the numerical library sees it.

The service turns stored observations into a :class:`History`; everything in
``models`` works on these arrays and never touches storage.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from models._typing import BoolArray, DateArray, FloatArray


@dataclass(frozen=True)
class History:
    """Aligned per-period arrays for one product, oldest period first.

    Parameters
    ----------
    sku : str
        The product's public identifier.
    periods : DateArray
        Period start dates (``datetime64[D]``), strictly increasing.
    price, units : FloatArray
        Own price and units sold in each period.
    unit_cost : FloatArray
        Unit cost per period; ``nan`` where unknown.
    in_stock : BoolArray
        False for periods in which the product was out of stock for part of the period.
    covariates : dict[str, FloatArray]
        Named numeric drivers (rival price index, promotion flag, ad spend, ...);
        ``nan`` where a period has no value.
    cross_prices : dict[str, FloatArray]
        Prices of other products (keyed by their sku) aligned to ``periods``.

    Examples
    --------
    >>> import numpy as np
    >>> h = History.from_lists("TEA-001", ["2025-01-06", "2025-01-13"], [4.5, 4.0], [10, 14])
    >>> h.n_periods
    2
    """

    sku: str
    periods: DateArray
    price: FloatArray
    units: FloatArray
    unit_cost: FloatArray
    in_stock: BoolArray
    covariates: dict[str, FloatArray] = field(default_factory=dict)
    cross_prices: dict[str, FloatArray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        n = self.periods.shape[0]
        for name in ("price", "units", "unit_cost", "in_stock"):
            if getattr(self, name).shape != (n,):
                raise ValueError(f"{name} must have one value per period ({n})")
        for group in (self.covariates, self.cross_prices):
            for key, values in group.items():
                if values.shape != (n,):
                    raise ValueError(f"{key} must have one value per period ({n})")

    @property
    def n_periods(self) -> int:
        return int(self.periods.shape[0])

    @classmethod
    def from_lists(
        cls,
        sku: str,
        periods: list[str],
        price: list[float],
        units: list[float],
        *,
        unit_cost: list[float] | None = None,
        in_stock: list[bool] | None = None,
        covariates: dict[str, list[float]] | None = None,
        cross_prices: dict[str, list[float]] | None = None,
    ) -> History:
        """Build a history from plain Python lists (tests and small scripts)."""
        n = len(periods)
        return cls(
            sku=sku,
            periods=np.array(periods, dtype="datetime64[D]"),
            price=np.asarray(price, dtype=np.float64),
            units=np.asarray(units, dtype=np.float64),
            unit_cost=(
                np.full(n, np.nan) if unit_cost is None else np.asarray(unit_cost, dtype=np.float64)
            ),
            in_stock=(
                np.ones(n, dtype=bool) if in_stock is None else np.asarray(in_stock, dtype=bool)
            ),
            covariates={k: np.asarray(v, dtype=np.float64) for k, v in (covariates or {}).items()},
            cross_prices={
                k: np.asarray(v, dtype=np.float64) for k, v in (cross_prices or {}).items()
            },
        )

    def head(self, n_periods: int) -> History:
        """The first ``n_periods`` periods (a negative count leaves out that many at the end).

        Examples
        --------
        >>> h = History.from_lists("TEA-001", ["2025-01-06", "2025-01-13", "2025-01-20"],
        ...                        [4.5, 4.0, 4.2], [10, 14, 12])
        >>> h.head(2).n_periods, h.head(-1).periods[-1]
        (2, np.datetime64('2025-01-13'))
        """
        part = slice(0, n_periods)
        return History(
            sku=self.sku,
            periods=self.periods[part],
            price=self.price[part],
            units=self.units[part],
            unit_cost=self.unit_cost[part],
            in_stock=self.in_stock[part],
            covariates={k: v[part] for k, v in self.covariates.items()},
            cross_prices={k: v[part] for k, v in self.cross_prices.items()},
        )
