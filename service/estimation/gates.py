"""The quality gates a new fit must pass to become the product's active fit."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from models import DemandFit
from service.core.settings import Settings

ACTIVE, SUPERSEDED, REJECTED = "active", "superseded", "rejected"


@dataclass(frozen=True)
class GateResult:
    name: str
    passed: bool
    detail: str

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "passed": self.passed, "detail": self.detail}


def quality_gates(
    fit: DemandFit, active_holdout_wape: float | None, settings: Settings
) -> list[GateResult]:
    """The checks a fit must pass to become the product's active fit."""
    own = fit.own_price
    gates = [
        GateResult(
            "wrong_sign",
            own.estimate < 0,
            f"own-price coefficient {own.estimate:.4g} "
            + (
                "is negative, as demand should fall when price rises"
                if own.estimate < 0
                else "is not negative, the wrong sign: demand would not fall when price rises"
            ),
        ),
        GateResult(
            "price_variation",
            not any(w.code == "low_price_variation" for w in fit.warnings),
            "the own price varied enough to identify its effect"
            if not any(w.code == "low_price_variation" for w in fit.warnings)
            else "the own price barely varied, so its effect cannot be told apart from noise",
        ),
        GateResult(
            "enough_observations",
            fit.quality.n_obs >= settings.gate_min_observations,
            f"{fit.quality.n_obs} observations (at least {settings.gate_min_observations} needed)",
        ),
    ]
    new_wape, old_wape = fit.quality.holdout_wape, active_holdout_wape
    if new_wape is None or old_wape is None:
        gates.append(
            GateResult(
                "holdout_not_worse", True, "no hold-out comparison with an active fit was possible"
            )
        )
    else:
        limit = old_wape * (1 + settings.gate_holdout_margin)
        gates.append(
            GateResult(
                "holdout_not_worse",
                new_wape <= limit,
                f"hold-out WAPE {new_wape:.4f} against the active fit's {old_wape:.4f} "
                f"(limit {limit:.4f})",
            )
        )
    return gates
