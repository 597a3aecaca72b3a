"""A short run of the load test (bench/load.py) in CI: mixed traffic, no errors.

The full run (thousands of requests) is done by hand; its results are in the README.
"""

from __future__ import annotations

import pytest

from bench import load


@pytest.mark.slow
def test_mixed_traffic_has_no_errors(capsys: pytest.CaptureFixture[str]) -> None:
    code = load.main(["--requests", "150", "--clients", "4", "--workers", "1", "--seconds", "90"])
    report = capsys.readouterr().out
    assert code == 0, report
    assert "errors 0" in report.splitlines()[0]
    assert "import" in report and "optimal-price" in report


def test_only_loopback_targets_are_accepted() -> None:
    with pytest.raises(SystemExit):
        load.run_load("http://10.1.2.3:8000", "mk_x_y", requests=1, seconds=1, clients=1)
