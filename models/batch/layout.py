"""What the products of one stacked group share, and how each product's periods are split."""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import Final

from models._typing import BoolArray, IntArray
from models.design import Term, fixed_terms, variable_terms
from models.spec import LOG_RESPONSE_FORMS, ModelSpec

INTERCEPT: Final = Term("intercept", "intercept", None, "fixed")


@dataclass(frozen=True)
class Layout:
    """What every chunk of one window length shares: terms, names, equation template."""

    spec: ModelSpec
    form: str
    width: int
    requested: int | None
    var_terms: tuple[Term, ...]
    terms: tuple[Term, ...]
    names: tuple[str, ...]
    log_response: bool
    equation: str

    @classmethod
    def of(cls, spec: ModelSpec, form: str, width: int, requested: int | None) -> Layout:
        var_terms = tuple(variable_terms(spec, form))
        terms = (INTERCEPT, *var_terms, *fixed_terms(spec))
        # equation_text's layout, with each sign and magnitude left to fill in.
        body = "%.4g" + "".join(f" %s %.4g {t.name.replace('%', '%%')}" for t in terms[1:])
        return cls(
            spec=spec,
            form=form,
            width=width,
            requested=requested,
            var_terms=var_terms,
            terms=terms,
            names=tuple(t.name for t in terms),
            log_response=form in LOG_RESPONSE_FORMS,
            equation=("units = " if form == "linear" else "ln(units) = ") + body,
        )


@dataclass(frozen=True)
class Plan:
    """Exclusions and hold-out split of each product of a chunk, as fit_demand makes them."""

    ok: IntArray
    keep: BoolArray
    usable: BoolArray
    n_usable: IntArray
    n_missing: IntArray
    n_stockouts: IntArray
    n_zero: IntArray
    holdout: IntArray
    train: BoolArray
    test: BoolArray

    def subset(self, ok: IntArray) -> Plan:
        """The plan of the accepted products only (``ok`` keeps their original positions)."""
        arrays = {f.name: getattr(self, f.name)[ok] for f in fields(self) if f.name != "ok"}
        return Plan(ok=ok, **arrays)
