"""How often ``auto`` finds the true form on the tea shop, and how often a refit changes it.

For each seed of the demo generator, every product without a trap is scored
(``models.select.score_forms_by_fold``) on its whole history and on its history eight
periods shorter (the refit before). Compared: the lowest hold-out WAPE (``choose_form``,
the rule before the steady choice), and the steady choice (``steady_form``) without and
with the earlier refit's form as ``previous``. Printed: the share of products whose true
form is chosen (overall and by true form) and the share whose choice changes between the
two refits.

Usage: python bench/form_choice.py [--seeds N]
"""

from __future__ import annotations

import argparse
from collections import Counter
from collections.abc import Callable

from models import COVARIATES, LOG_COVARIATES, ModelSpec, generate_catalogue
from models.select import FormScores, choose_form, score_forms_by_fold, steady_form

Rule = Callable[[FormScores, str | None], str]
RULES: dict[str, Rule] = {
    "lowest WAPE": lambda s, previous: choose_form(s.overall),
    "steady": lambda s, previous: steady_form(s),
    "steady + previous": steady_form,
}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=20)
    args = parser.parse_args()
    spec = ModelSpec(form="auto", covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    found: Counter[tuple[str, str]] = Counter()
    flips: Counter[str] = Counter()
    per_form: Counter[str] = Counter()
    total = 0
    for seed in range(1, args.seeds + 1):
        products = [p for p in generate_catalogue(seed).products if p.truth.trap is None]
        now = score_forms_by_fold([p.history for p in products], spec)
        before = score_forms_by_fold([p.history.head(-8) for p in products], spec)
        for product, later, earlier in zip(products, now, before, strict=True):
            if isinstance(later, Exception) or isinstance(earlier, Exception):
                continue
            total += 1
            per_form[product.truth.form] += 1
            for name, rule in RULES.items():
                then = rule(earlier, None)
                choice = rule(later, then)
                found[(name, product.truth.form)] += choice == product.truth.form
                flips[name] += choice != then
    print(f"seeds 1-{args.seeds}, products {total} ({dict(per_form)})")
    forms = sorted(per_form)
    print(f"{'rule':<18} {'true form':>9} " + " ".join(f"{f:>9}" for f in forms) + "  changed")
    for name in RULES:
        share = sum(found[(name, f)] for f in forms) / total
        by_form = " ".join(f"{found[(name, f)] / per_form[f]:>9.3f}" for f in forms)
        print(f"{name:<18} {share:>9.3f} {by_form}  {flips[name] / total:.3f}")


if __name__ == "__main__":
    main()
