"""Mistakes on the command line are told in one line, with a non-zero exit, never a traceback."""

from __future__ import annotations

import pytest

from service import cli
from service.catalogue import demo
from service.core.settings import get_settings
from tests.plugins.storage import Database


@pytest.fixture
def run(db: Database, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]):  # type: ignore[no-untyped-def]
    monkeypatch.setenv("MARGINAL_DATABASE_URL", db.settings.database_url)
    if db.settings.database_schema:
        monkeypatch.setenv("MARGINAL_DATABASE_SCHEMA", db.settings.database_schema)

    def call(*args: str) -> tuple[int, str, str]:
        get_settings.cache_clear()  # the command reads this test's database from the env
        try:
            code = cli.main(list(args))
        finally:
            get_settings.cache_clear()
        out = capsys.readouterr()
        return code, out.out, out.err

    return call


def _one_error_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("marginal: error: "), err
    assert "Traceback" not in err
    return lines[0]


@pytest.mark.storage
def test_revoking_an_unknown_key_is_one_line(run) -> None:  # type: ignore[no-untyped-def]
    code, _, err = run("keys", "revoke", "mk_nosuchkey")
    assert code == 2
    assert "no API key with id 'mk_nosuchkey'" in _one_error_line(err)


@pytest.mark.storage
@pytest.mark.parametrize(
    ("request_text", "said"),
    [
        ("{not json", "--request is not JSON"),
        ("[1, 2]", "--request must be a JSON object"),
        ('{"objective": "volume"}', "the reprice request is invalid"),
        ('{"uncertainty_draws": -1}', "request.uncertainty_draws"),
    ],
)
def test_a_bad_reprice_request_is_one_line(run, request_text: str, said: str) -> None:  # type: ignore[no-untyped-def]
    code, _, err = run("reprice", "--all", "--request", request_text)
    assert code == 2
    assert said in _one_error_line(err)


@pytest.mark.storage
def test_a_spec_without_refit_unchanged_is_refused(run, db: Database) -> None:  # type: ignore[no-untyped-def]
    demo.load(db.settings, seed=7)
    code, _, err = run("refit", "--sku", "TEA-004", "--spec", '{"form": "log-log"}')
    assert code == 2
    assert "needs refit_unchanged" in _one_error_line(err)
    code, out, _ = run(
        "refit", "--sku", "TEA-004", "--spec", '{"form": "log-log"}', "--refit-unchanged"
    )
    assert code == 0 and "activated" in out, out + err


@pytest.mark.storage
def test_an_invalid_spec_is_one_line(run) -> None:  # type: ignore[no-untyped-def]
    code, _, err = run("refit", "--all", "--refit-unchanged", "--spec", '{"form": "cubic"}')
    assert code == 2
    assert "the model specification is invalid" in _one_error_line(err)


@pytest.mark.storage
def test_a_family_without_products_is_refused(run, db: Database) -> None:  # type: ignore[no-untyped-def]
    demo.load(db.settings, seed=7)
    for command in ("refit", "reprice"):
        code, _, err = run(command, "--family", "coffee")
        assert code == 2
        assert "no products in family 'coffee'" in _one_error_line(err)


@pytest.mark.storage
def test_reprice_has_no_refit_option(run) -> None:  # type: ignore[no-untyped-def]
    # It once took a switch that did nothing; argparse refuses the refit's switch and the
    # retired name alike (exit 2, its own usage line), and refit no longer knows --force.
    for command in (("reprice", "--refit-unchanged"), ("reprice", "--force"), ("refit", "--force")):
        with pytest.raises(SystemExit) as refused:
            run(*command, "--all")
        assert refused.value.code == 2


@pytest.mark.storage
def test_schema_steps_in_our_words(run) -> None:  # type: ignore[no-untyped-def]
    code, out, _ = run("schema", "show")
    assert code == 0 and out.strip() and out.strip() != "empty (no schema step applied)"
    code, _, err = run("schema", "undo", "--to", "9999")
    assert code == 2
    assert "no schema step '9999'" in _one_error_line(err)


@pytest.mark.storage
def test_keys_list_has_a_header(run) -> None:  # type: ignore[no-untyped-def]
    assert run("keys", "create", "--name", "ops", "--scope", "read")[0] == 0
    code, out, _ = run("keys", "list")
    assert code == 0
    assert out.splitlines()[0].split("\t") == ["id", "name", "scopes", "state", "last used"]
    assert out.splitlines()[1].split("\t")[1:] == ["ops", "read", "active", "never"]
