"""Borrow strength: shrink each product's own-price effect toward its family and catalogue.

Every fit's own-price elasticity at the means (with its delta-method standard error) is
put on one scale, whatever the form: for ``log-log`` and ``poisson`` it is the
coefficient of ``ln(price)``, for ``semi-log`` the coefficient times the mean price, for
``linear`` the slope times the mean price over the expected units there. The
elasticities are shrunk by :func:`models.normal_means.normal_means` (REML spreads within
and between families, normal posterior given them).

The shrunk elasticity is carried back to each fit's coefficients as a normal update:
the product's own estimate ``beta ~ N(b, V)`` meets the information the other products
give about its elasticity ``g(beta)``, a normal prior ``N(m, v)`` chosen so that the
posterior of ``g(beta)`` is the shrunk value and variance. Linearising ``g`` at the
estimate, the update is ``b + V a (m - g) / (a'V a + v)`` and ``V - V a a'V / (a'V a + v)``
with ``a`` the gradient of ``g``: correlated coefficients (the intercept above all) move
with the own-price one, and the covariance stays positive semi-definite. For the linear
form ``g`` is not linear: the step along ``V a`` is lengthened until ``g`` of the new
coefficients equals the shrunk value, and the covariance update, linearised there, is
scaled so that the elasticity's variance equals the shrunk one.
Predictions at the means barely move (the curve turns about the fitted centre).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Final

import numpy as np
from scipy import special, stats

from models._typing import FloatArray
from models.checks import equation_text
from models.elasticity import design_row, point_values
from models.normal_means import MIN_ESTIMATES, NormalMeans, normal_means
from models.result import Coefficient, DemandFit

_LINEAR_STEPS: Final = 8
LARGEST: Final = 1000.0
"""Own-price elasticities or standard errors beyond this tell the catalogue nothing (our
bound; real ones are within about ±10) and are left out, so that no hostile number can
swamp the others' spreads."""
_UNREADABLE: Final = (ValueError, KeyError, IndexError, ArithmeticError, np.linalg.LinAlgError)


@dataclass(frozen=True)
class ShrunkElasticity:
    """One product's own-price elasticity at the means, as estimated and as shrunk.

    Attributes
    ----------
    sku, family : str
        The product and the family it was shrunk toward (None: the product has no family,
        or families were not given or were all one; it then shrinks toward the catalogue,
        as a family of its own when others have families).
    estimate, std_error : float
        The product's own elasticity and its standard error.
    shrunk, shrunk_std_error : float
        The shrunk elasticity and its standard error.
    ci_low, ci_high : float
        The shrunk value's 95% interval (normal).
    family_mean : float
        The estimated mean elasticity of the family (of the catalogue without families).
    weight_on_family : float
        The family mean's weight in the shrunk value (0: the product's own estimate kept).
    """

    sku: str
    family: str | None
    estimate: float
    std_error: float
    shrunk: float
    shrunk_std_error: float
    ci_low: float
    ci_high: float
    family_mean: float
    weight_on_family: float


@dataclass(frozen=True)
class Shrinkage:
    """Own-price shrinkage over a set of fits.

    Attributes
    ----------
    products : tuple of ShrunkElasticity
        The fits that took part, in input order.
    left_out : tuple of str
        Skus whose elasticity could not be used (not finite, no standard error).
    catalogue_mean, catalogue_mean_std_error : float
        The estimated mean own-price elasticity of the catalogue and its standard error.
    spread_within_family, spread_between_families : float
        Standard deviations of true elasticities around their family's mean, and of the
        family means around the catalogue's (0 without families).
    fits : tuple of DemandFit
        The input fits in order, each shrunk copy in place of its original (see
        :func:`shrunk_fit`); fits left out are returned unchanged.
    """

    products: tuple[ShrunkElasticity, ...]
    left_out: tuple[str, ...]
    catalogue_mean: float
    catalogue_mean_std_error: float
    spread_within_family: float
    spread_between_families: float
    fits: tuple[DemandFit, ...]

    def product(self, sku: str) -> ShrunkElasticity:
        """The shrunk elasticity of one product."""
        for row in self.products:
            if row.sku == sku:
                return row
        raise KeyError(sku)

    def fit(self, sku: str) -> DemandFit:
        """The (shrunk) fit of one product."""
        for fit in self.fits:
            if fit.sku == sku:
                return fit
        raise KeyError(sku)


def own_elasticity(fit: DemandFit, params: FloatArray | None = None) -> tuple[float, FloatArray]:
    """The own-price elasticity at the means and its gradient in the coefficients.

    The same value as ``elasticities(fit, at="mean").own.value`` (for ``params`` given,
    of the fit with those coefficients).
    """
    beta = fit.params if params is None else params
    _, variables, fixed = point_values(fit, "mean")
    a = design_row(fit, variables, fixed)
    j = [t.kind for t in fit.terms].index("own_price")
    term = fit.terms[j]
    unit = np.zeros(beta.size)
    unit[j] = 1.0
    price = variables["price"]
    if term.transform == "log":
        return float(beta[j]), unit
    if fit.form != "linear":
        return float(beta[j] * price), price * unit
    units_hat = float(a @ beta)
    if not units_hat > 0.0:
        return float("nan"), unit * np.nan
    value = float(beta[j] * price / units_hat)
    return value, price * unit / units_hat - value * a / units_hat


def shrink_own_price(
    fits: Sequence[DemandFit], *, families: Mapping[str, str] | None = None
) -> Shrinkage:
    """Shrink every fit's own-price elasticity toward its family and the catalogue.

    Parameters
    ----------
    fits : sequence of DemandFit
        Fits of different products, any forms (each sku once).
    families : mapping of sku to family, optional
        Without it, or with fewer than two families among the fits, all shrink toward
        the catalogue mean. A sku missing from it forms a family of its own.

    A fit whose own-price elasticity cannot be computed (no finite value or standard
    error, or either beyond ``LARGEST``) is left out (``left_out``) and returned
    unchanged; it never stops the others.

    Raises
    ------
    ValueError
        Fewer than three fits have a usable elasticity, or a sku repeats.

    Examples
    --------
    >>> from models import COVARIATES, LOG_COVARIATES, ModelSpec, fit_many, generate_catalogue
    >>> cat = generate_catalogue(7)
    >>> spec = ModelSpec(covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    >>> sample = [p for p in cat.products if p.truth.trap is None][:12]
    >>> fits = fit_many([p.history for p in sample], spec)
    >>> result = shrink_own_price(fits, families={p.sku: p.family for p in sample})
    >>> row = result.products[0]
    >>> row.shrunk_std_error < row.std_error
    True
    """
    skus = [fit.sku for fit in fits]
    if len(set(skus)) != len(skus):
        raise ValueError("each product may appear once")
    used: list[int] = []
    values: list[float] = []
    errors: list[float] = []
    for i, fit in enumerate(fits):
        try:  # a fit whose numbers cannot be read is left out alone
            with np.errstate(all="ignore"):
                value, grad = own_elasticity(fit)
                variance = float(grad @ fit.cov @ grad) if np.isfinite(value) else float("nan")
        except _UNREADABLE:
            continue
        if abs(value) <= LARGEST and 0.0 < variance <= LARGEST**2:
            used.append(i)
            values.append(value)
            errors.append(float(np.sqrt(variance)))
    if len(used) < MIN_ESTIMATES:
        raise ValueError(
            f"shrinkage needs at least {MIN_ESTIMATES} products with a usable own-price "
            f"elasticity; got {len(used)}"
        )
    names = None
    if families is not None:
        names = [families.get(fits[i].sku, f"(sku {fits[i].sku})") for i in used]
    result = normal_means(values, errors, names)
    two_level = len(result.family_means) > 1
    z = float(stats.norm.ppf(0.975))
    rows = []
    out = list(fits)
    for k, i in enumerate(used):
        has_family = families is not None and fits[i].sku in families
        family = names[k] if names is not None and two_level and has_family else None
        shrunk, se = result.shrunk[k], result.shrunk_std_error[k]
        row = ShrunkElasticity(
            sku=fits[i].sku,
            family=family,
            estimate=values[k],
            std_error=errors[k],
            shrunk=shrunk,
            shrunk_std_error=se,
            ci_low=shrunk - z * se,
            ci_high=shrunk + z * se,
            family_mean=_family_mean(result, names[k] if names is not None and two_level else None),
            weight_on_family=result.weight_on_family[k],
        )
        rows.append(row)
        try:
            with np.errstate(all="ignore"):
                out[i] = shrunk_fit(fits[i], row)
        except _UNREADABLE:
            out[i] = fits[i]  # the shrunk elasticity stands; the fit keeps its own numbers
    return Shrinkage(
        products=tuple(rows),
        left_out=tuple(fits[i].sku for i in range(len(fits)) if i not in set(used)),
        catalogue_mean=result.mean,
        catalogue_mean_std_error=result.mean_std_error,
        spread_within_family=result.spread,
        spread_between_families=result.family_spread,
        fits=tuple(out),
    )


def _family_mean(result: NormalMeans, family: str | None) -> float:
    return result.mean if family is None else result.family_means[family]


def shrunk_fit(fit: DemandFit, shrunk: ShrunkElasticity) -> DemandFit:
    """A copy of ``fit`` whose coefficients and covariance carry the shrunk elasticity.

    The own-price elasticity at the means of the copy equals ``shrunk.shrunk`` and its
    standard error ``shrunk.shrunk_std_error``; the other coefficients move by their
    correlation with the own-price one (see the module's description). Everything else
    (quality, hold-out WAPE, warnings, means) is the fit's own.

    Raises
    ------
    ValueError
        ``shrunk`` belongs to another product.

    Examples
    --------
    >>> from models import ModelSpec, fit_demand, simulate_product
    >>> fit = fit_demand(simulate_product(3, elasticity=-2.0).history, ModelSpec())
    >>> own = own_elasticity(fit)[0]
    >>> row = ShrunkElasticity(fit.sku, None, own, 0.4, -2.0, 0.2, -2.4, -1.6, -2.0, 0.5)
    >>> copy = shrunk_fit(fit, row)
    >>> round(copy.own_price.estimate, 6), round(copy.own_price.std_error, 6)
    (-2.0, 0.2)
    """
    if shrunk.sku != fit.sku:
        raise ValueError(f"the shrunk elasticity of {shrunk.sku} does not belong to {fit.sku}")
    b, cov = fit.params, fit.cov
    value, grad = own_elasticity(fit)
    s2, post2 = float(grad @ cov @ grad), shrunk.shrunk_std_error**2
    if not (np.isfinite(value) and s2 > 0.0 and post2 < s2):
        return fit  # nothing was learnt from the other products
    # The prior N(m, v) whose combination with N(value, s2) gives N(shrunk, post2).
    v = 1.0 / (1.0 / post2 - 1.0 / s2)
    m = v * (shrunk.shrunk / post2 - value / s2)
    direction = cov @ grad / (s2 + v)
    step = m - value
    beta = b + step * direction
    if fit.form == "linear":
        # g is not linear in beta: move along the same direction until it gives the
        # shrunk value exactly (Newton's method on the step length).
        for _ in range(_LINEAR_STEPS):
            g_value, g = own_elasticity(fit, beta)
            slope = float(g @ direction)
            if not (np.isfinite(g_value) and slope != 0.0):
                return fit
            step += (shrunk.shrunk - g_value) / slope
            beta = b + step * direction
    g = own_elasticity(fit, beta)[1]
    s2_new = float(g @ cov @ g)
    if not s2_new > post2:
        return fit
    v = 1.0 / (1.0 / post2 - 1.0 / s2_new)
    new_cov = cov - np.outer(cov @ g, g @ cov) / (s2_new + v)
    new_cov = 0.5 * (new_cov + new_cov.T)
    return _with_coefficients(fit, beta, new_cov)


def _with_coefficients(fit: DemandFit, beta: FloatArray, cov: FloatArray) -> DemandFit:
    """The fit with new coefficients and covariance: t statistics, p-values and 95%
    intervals recomputed (Student's t with the fit's residual degrees of freedom, or the
    normal for fits that use it), all coefficients at once."""
    se = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        t_stat = np.where(se > 0, beta / se, np.nan)
    if fit.use_t:
        crit = float(special.stdtrit(fit.df_resid, 0.975))
        p_value = 2.0 * special.stdtr(fit.df_resid, -np.abs(t_stat))
    else:
        crit = float(special.ndtri(0.975))
        p_value = 2.0 * special.ndtr(-np.abs(t_stat))
    columns = zip(
        fit.coefficients,
        beta.tolist(),
        se.tolist(),
        t_stat.tolist(),
        p_value.tolist(),
        strict=True,
    )
    rows = tuple(
        Coefficient(
            term=row.term,
            estimate=estimate,
            std_error=error,
            t_stat=t,
            p_value=p,
            ci_low=estimate - crit * error,
            ci_high=estimate + crit * error,
            vif=row.vif,
        )
        for row, estimate, error, t, p in columns
    )
    return replace(
        fit,
        coefficients=rows,
        covariance=tuple(tuple(r) for r in cov.tolist()),
        equation=equation_text(fit.form, fit.terms, beta.tolist()),
    )
