"""NIST StRD linear sets through the HTTP API: stored as observations, fitted, read back.

Source of the certified values: NIST/ITL StRD, Linear Least Squares Regression
(https://www.itl.nist.gov/div898/strd/lls/lls.shtml), copied into tests/reference/ with the
stored copy each was read from (see tests/reference/test_nist_strd.py, which also checks
the library paths and the sets the API cannot express). x is sent as the price and its
powers (or Longley's other regressors) as covariates; the fit is `linear` with classical
errors. Required: LRE >= 9 on coefficients and standard errors, >= 7 on Filip.

The API takes only positive prices, so the price is the first regressor that is positive
in every row (Filip's x is negative: x**2 plays the price there) and the others are
covariates; Wampler1 and Wampler2 (x = 0 in a row, so no column is positive throughout)
and Wampler3-5 (negative y) are checked through the library only.
"""

from __future__ import annotations

import datetime as dt
import math

import pytest
from fastapi.testclient import TestClient

from tests.plugins.reference_data import nist_set

pytestmark = pytest.mark.storage

# Every set with an intercept, non-negative y and a regressor positive in every row.
SETS = {"Norris": 9.0, "Pontius": 9.0, "Longley": 9.0, "Filip": 7.0}


def _lre(estimate: float, certified: float) -> float:
    error = abs(estimate - certified) / (abs(certified) if certified else 1.0)
    return 15.0 if error == 0.0 else min(15.0, -math.log10(error))


@pytest.mark.parametrize("name", sorted(SETS))
def test_certified_values_over_http(client: TestClient, headers: dict[str, str], name: str) -> None:
    case = nist_set(name)
    sku = f"NIST-{name.upper()}"
    start = dt.date(2001, 1, 1)
    regressors = case.design[:, 1:]
    price_column = next(j for j in range(regressors.shape[1]) if (regressors[:, j] > 0).all())
    others = [j for j in range(regressors.shape[1]) if j != price_column]
    names = [f"x{j + 1}" for j in others]
    # NIST parameter B_k (k >= 1) multiplies regressor k - 1; its term name in the answer:
    term_of = {0: "intercept", price_column + 1: "price"} | {j + 1: f"x{j + 1}" for j in others}
    observations = [
        {
            "period": (start + dt.timedelta(weeks=t)).isoformat(),
            "price": float(row[price_column]),
            "units": float(y),
            "covariates": {c: float(row[j]) for c, j in zip(names, others, strict=True)},
        }
        for t, (row, y) in enumerate(zip(regressors, case.y, strict=True))
    ]
    assert (
        client.put(f"/v1/products/{sku}", json={"name": name}, headers=headers).status_code == 201
    )
    stored = client.post(
        f"/v1/products/{sku}/observations", json={"observations": observations}, headers=headers
    )
    assert stored.status_code == 200, stored.text
    spec = {"form": "linear", "covariates": names, "standard_errors": "classical"}
    fit = client.post(f"/v1/products/{sku}/fits", json={"spec": spec}, headers=headers)
    assert fit.status_code == 201, fit.text
    body = fit.json()
    by_term = {r["term"]: r for r in body["coefficients"]}
    assert len(by_term) == len(case.certified)  # no term dropped, Filip included
    rows = [by_term[term_of[k]] for k in range(len(case.certified))]
    assert "terms_dropped" not in [w["code"] for w in body["warnings"]]
    required = SETS[name]
    coefficients = min(_lre(r["estimate"], c) for r, c in zip(rows, case.certified, strict=True))
    errors = min(_lre(r["std_error"], c) for r, c in zip(rows, case.certified_sd, strict=True))
    print(f"{name}: LRE coefficients {coefficients:.1f}, standard errors {errors:.1f} (HTTP)")
    assert coefficients >= required and errors >= required, (name, coefficients, errors)
