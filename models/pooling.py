"""Empirical-Bayes pooling of own-price elasticities within a product family.

Each family's spread of true elasticities is estimated by the DerSimonian-Laird
method of moments (DerSimonian & Laird 1986, Controlled Clinical Trials 7, 177-188);
each product's estimate is then shrunk toward the precision-weighted family mean
with weight ``s^2 / (s^2 + tau^2)`` (Efron & Morris 1975): noisy products move most.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Mapping, Sequence
from dataclasses import replace

import numpy as np

from models.elasticity import elasticities
from models.result import DemandFit, PooledElasticity

WHOLE_BATCH = "(batch)"


def pool_family(
    fits: Sequence[DemandFit], *, families: Mapping[str, str] | None = None
) -> list[DemandFit]:
    """Copies of ``fits`` carrying a :class:`PooledElasticity` (families of one stay unpooled).

    Parameters
    ----------
    fits : sequence of DemandFit
    families : mapping of sku to family, optional
        Without it every fit belongs to one family.

    Examples
    --------
    >>> pool_family([])
    []
    """
    groups: dict[str, list[int]] = defaultdict(list)
    for i, fit in enumerate(fits):
        family = WHOLE_BATCH if families is None else families.get(fit.sku)
        if family is not None:
            groups[family].append(i)
    out = list(fits)
    for family, members in groups.items():
        if len(members) < 2:
            continue
        own = [elasticities(fits[i], at="mean").own for i in members]
        value = np.array([r.value for r in own])
        var = np.array([r.std_error for r in own]) ** 2
        ok = np.isfinite(value) & np.isfinite(var) & (var > 0)
        if ok.sum() < 2:
            continue
        weight = 1.0 / var[ok]
        fixed_mean = float(np.sum(weight * value[ok]) / weight.sum())
        q_stat = float(np.sum(weight * (value[ok] - fixed_mean) ** 2))
        denom = float(weight.sum() - np.sum(weight**2) / weight.sum())
        tau2 = max(0.0, (q_stat - (ok.sum() - 1)) / denom) if denom > 0 else 0.0
        total = 1.0 / (var[ok] + tau2)
        mean = float(np.sum(total * value[ok]) / total.sum())
        mean_var = 1.0 / float(total.sum())
        for i, v, s2, good in zip(members, value, var, ok, strict=True):
            if not good:
                continue
            shrink = float(s2 / (s2 + tau2)) if (s2 + tau2) > 0 else 1.0
            pooled_var = (1.0 - shrink) * s2 + shrink**2 * mean_var
            out[i] = replace(
                fits[i],
                pooled=PooledElasticity(
                    family=family,
                    raw=float(v),
                    raw_std_error=float(np.sqrt(s2)),
                    pooled=shrink * mean + (1.0 - shrink) * float(v),
                    pooled_std_error=float(np.sqrt(pooled_var)),
                    family_mean=mean,
                    between_variance=tau2,
                    weight_on_family=shrink,
                    n_products=int(ok.sum()),
                ),
            )
    return out
