"""A quick run of the decision study (bench/decisions.py --quick): every generator scored.

The full run (20 seeds of the tea shop, 10 of each market-share shop) is done by hand;
its table is in the README and docs/estimation.md.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from bench import decisions
from bench.decision_cases import market_share_cases

GENERATORS = ("tea-shop", "market-share", "market-share, near best")


@pytest.mark.slow
def test_quick_study_scores_every_generator_and_choice(capsys: pytest.CaptureFixture[str]) -> None:
    decisions.main(["--quick"])
    report = capsys.readouterr().out
    for generator in GENERATORS:
        assert f"\n{generator}: " in report
    names = [decisions.KEEP, *[r[0] for r in decisions.RULES], decisions.CALIBRATED]
    names += list(decisions.VARIANTS)
    names += list(decisions.CEILINGS)
    for name in names:
        rows = re.findall(
            rf"^{re.escape(name)} +([\d.]+) +([\d.]+) +(\d+)% +([\d.]+)$", report, re.M
        )
        assert len(rows) == len(GENERATORS), name
        for median, p10, share, mean in rows:
            # A score is true profit over the best true profit in the same allowed prices:
            # nothing may exceed 100% (definition of the maximum).
            assert float(p10) <= float(median) <= 100.0 + 1e-9
            assert float(mean) <= 100.0 + 1e-9
            assert 0 <= int(share) <= 100


def test_scores_never_exceed_the_true_best_price() -> None:
    # Scoring against the maximum over the same allowed prices: every price the study
    # proposes, the current one included, scores at most 100% (definition of a maximum).
    for case in list(market_share_cases(3, 4)):
        scores = decisions.score_case(case)
        assert max(scores.values()) <= 100.0 + 1e-7, scores
        assert np.isfinite(list(scores.values())).all()
