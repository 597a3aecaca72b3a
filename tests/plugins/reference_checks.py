"""Checks of our regression figures against a reference, one test per quantity.

A reference test is a class that subclasses one of the checking classes below and sets,
in ``setup_class``, ``res1`` (our figures) and ``res2`` (the reference's figures, with
their source named in ``res2.source``). Each quantity is judged by its own tolerance:
``tol_<quantity>`` on the class, else the class's ``tolerance``; for coefficients and
standard errors a tolerance may also be given per term (a mapping from term name).

* :class:`CheckCoefficients`: ``params``, ``bse`` and ``nobs``;
* :class:`CheckRegressionResults`: those and ``sigma``, ``rsquared``, ``fvalue``;
* :class:`CheckInstrumentalResults`: those and ``rsquared_adj``, ``f_pvalue``,
  ``first_stage_f`` and ``endogeneity_p``.

Tolerances: :class:`SignificantDigits` (NIST's log relative error), :class:`Printed` (half
a unit in the last printed place of a published figure), :class:`Absolute` and
:class:`Exact`. A reference figure may be a number or the text a source printed (kept as
text so that its printed precision sets the tolerance).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import ClassVar, Protocol

Value = float | int | str


def lre(estimate: float, certified: float) -> float:
    """NIST log relative error: the number of matching significant digits (17 if exact)."""
    err = abs(float(estimate) - float(certified)) / abs(float(certified))
    return -math.log10(max(err, 1e-17))


def printed_half_unit(printed: str) -> float:
    """Half a unit in the last place of a printed number ('.1086487', '1.21e+04', '428')."""
    text = printed.strip().lower()
    mantissa, _, exponent = text.partition("e")
    decimals = len(mantissa.split(".")[1]) if "." in mantissa else 0
    return 0.5 * 10.0 ** (int(exponent or 0) - decimals)


class Tolerance(Protocol):
    def check(self, label: str, ours: float, reference: Value) -> None: ...


@dataclass(frozen=True)
class SignificantDigits:
    """At least ``digits`` significant digits agree (NIST StRD's LRE criterion)."""

    digits: float

    def check(self, label: str, ours: float, reference: Value) -> None:
        digits = lre(ours, float(reference))
        assert digits >= self.digits, (
            f"{label}: {ours!r} vs {reference!r}, {digits:.1f} digits < {self.digits}"
        )


@dataclass(frozen=True)
class Printed:
    """Equal at the printed precision: within half a unit of the last printed digit.

    ``slack`` allows for rounding in the bound itself.
    """

    slack: float = 1e-12

    def check(self, label: str, ours: float, reference: Value) -> None:
        assert isinstance(reference, str), f"{label}: the printed text is needed, not a number"
        bound = printed_half_unit(reference) + self.slack
        assert abs(float(ours) - float(reference)) <= bound, (
            f"{label}: {ours!r} vs printed {reference}, allowed {bound:.3g}"
        )


@dataclass(frozen=True)
class Absolute:
    """Within ``tol`` of the reference value."""

    tol: float

    def check(self, label: str, ours: float, reference: Value) -> None:
        assert abs(float(ours) - float(reference)) <= self.tol, (
            f"{label}: {ours!r} vs {reference!r}, allowed {self.tol:.3g}"
        )


@dataclass(frozen=True)
class Exact:
    """Exactly equal (counts)."""

    def check(self, label: str, ours: float, reference: Value) -> None:
        assert float(ours) == float(reference), f"{label}: {ours!r} vs {reference!r}"


@dataclass(frozen=True)
class Figures:
    """The figures of one regression; coefficients and standard errors by term name."""

    source: str
    params: Mapping[str, Value] = field(default_factory=dict)
    bse: Mapping[str, Value] = field(default_factory=dict)
    nobs: Value | None = None
    sigma: Value | None = None
    rsquared: Value | None = None
    fvalue: Value | None = None
    rsquared_adj: Value | None = None
    f_pvalue: Value | None = None
    first_stage_f: Value | None = None
    endogeneity_p: Value | None = None


class CheckCoefficients:
    """Coefficients, their standard errors and the number of observations."""

    res1: ClassVar[Figures]  # ours
    res2: ClassVar[Figures]  # the reference
    tolerance: ClassVar[Tolerance]
    tol_nobs: ClassVar[Tolerance] = Exact()

    def check(self, quantity: str) -> None:
        ours, reference = getattr(self.res1, quantity), getattr(self.res2, quantity)
        rule: Tolerance | Mapping[str, Tolerance] = getattr(self, f"tol_{quantity}", None) or (
            self.tolerance
        )
        source = self.res2.source
        assert reference is not None and reference != {}, f"{source} gives no {quantity}"
        if isinstance(reference, Mapping):
            assert set(reference) <= set(ours), (quantity, sorted(reference), sorted(ours))
            for term, value in reference.items():
                term_rule = rule[term] if isinstance(rule, Mapping) else rule
                term_rule.check(f"{source} {quantity}[{term}]", ours[term], value)
        else:
            assert ours is not None, f"no {quantity} of ours to compare with {source}"
            assert not isinstance(rule, Mapping)
            rule.check(f"{source} {quantity}", ours, reference)

    def test_params(self) -> None:
        self.check("params")

    def test_bse(self) -> None:
        self.check("bse")

    def test_nobs(self) -> None:
        self.check("nobs")


class CheckRegressionResults(CheckCoefficients):
    """Coefficients and the fit statistics of a regression table."""

    def test_sigma(self) -> None:
        self.check("sigma")

    def test_rsquared(self) -> None:
        self.check("rsquared")

    def test_fvalue(self) -> None:
        self.check("fvalue")


class CheckInstrumentalResults(CheckRegressionResults):
    """An instrumental-variables fit: the table and the instrument diagnostics."""

    def test_rsquared_adj(self) -> None:
        self.check("rsquared_adj")

    def test_f_pvalue(self) -> None:
        self.check("f_pvalue")

    def test_first_stage_f(self) -> None:
        self.check("first_stage_f")

    def test_endogeneity_p(self) -> None:
        self.check("endogeneity_p")
