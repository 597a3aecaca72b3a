"""One word per idea (docs/glossary.md): the names a user meets in the OpenAPI document,
the command line's help and the analyst view never use the words the glossary retires,
nor an optimiser's or a migration tool's own vocabulary."""

from __future__ import annotations

import argparse
import json
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from service.cli import OPENAPI_PATH, build_parser

ROOT = Path(__file__).resolve().parents[2]
TEMPLATES = ROOT / "service" / "ui" / "templates"

# Words of the libraries underneath, which a reader would trace back to them.
LIBRARY_WORDS = re.compile(
    r"\b(nit|SLSQP|scipy|OptimizeResult|Optimization terminated|alembic|revision|"
    r"upgrade|downgrade)\b",
    re.IGNORECASE,
)
# Synonyms the glossary retires from prose (identifiers with underscores are exempt).
SYNONYMS = {
    r"(?<![_\w])holdout(?![_\w])": "hold-out",
    r"\bR-squared\b|\bR2\b": "R²",
    r"\bbusiness rules?\b": "constraint",
    r"\bladder rules?\b": "order constraint",
}
# Names retired because one word named two ideas, or one idea had several names.
RETIRED_NAMES = {
    r"\bforced?\b": "refit_unchanged (jobs) or allow_wrong_sign (pricing)",
    r"\bskipped\b": "unchanged (refit) or no_active_fit (reprice)",
    r"own_price_positive|expected_sign|draws_wrong_sign|wrong_sign_forced|upward": "wrong sign",
}
# Fields of a recommendation that carried an optimiser's vocabulary.
OPTIMISER_FIELDS = {"method", "success", "status", "message", "nit"}


def _walk(node: Any, path: str = "") -> Iterator[tuple[str, Any]]:
    yield path, node
    if isinstance(node, dict):
        for key, value in node.items():
            yield from _walk(value, f"{path}/{key}")
    elif isinstance(node, list):
        for i, value in enumerate(node):
            yield from _walk(value, f"{path}[{i}]")


def _openapi_texts() -> Iterator[tuple[str, str]]:
    document = json.loads(OPENAPI_PATH.read_text())
    for path, node in _walk(document):
        if isinstance(node, dict):
            for name in ("summary", "description", "title"):
                if isinstance(node.get(name), str):
                    yield f"openapi {path}/{name}", node[name]
            for name in node.get("properties", {}) or {}:
                yield f"openapi {path}/properties", name
            if isinstance(node.get("enum"), list):
                yield f"openapi {path}/enum", " ".join(map(str, node["enum"]))


def _cli_texts() -> Iterator[tuple[str, str]]:
    def walk(parser: argparse.ArgumentParser, name: str) -> Iterator[tuple[str, str]]:
        yield f"cli {name}", parser.format_help()
        for action in parser._actions:  # argparse keeps subcommands here only
            if isinstance(action, argparse._SubParsersAction):
                for sub, subparser in action.choices.items():
                    yield from walk(subparser, f"{name} {sub}")

    yield from walk(build_parser(), "marginal")


def _template_texts() -> Iterator[tuple[str, str]]:
    for template in sorted(TEMPLATES.glob("*.html")):
        text = template.read_text()
        text = re.sub(r"{#.*?#}|{%.*?%}|{{.*?}}", " ", text, flags=re.DOTALL)  # Jinja
        text = re.sub(r"<[^>]+>", " ", text)  # tags and their attributes
        yield f"template {template.name}", text


def _all_texts() -> list[tuple[str, str]]:
    return [*_openapi_texts(), *_cli_texts(), *_template_texts()]


def test_no_library_words() -> None:
    found = [
        (where, match.group(0))
        for where, text in _all_texts()
        for match in LIBRARY_WORDS.finditer(text)
    ]
    assert found == []


@pytest.mark.parametrize(("pattern", "word"), list(SYNONYMS.items()))
def test_no_retired_synonyms(pattern: str, word: str) -> None:
    found = [
        (where, match.group(0))
        for where, text in _all_texts()
        for match in re.finditer(pattern, text)
    ]
    assert found == [], f"say {word!r}"


@pytest.mark.parametrize(("pattern", "word"), list(RETIRED_NAMES.items()))
def test_no_retired_names(pattern: str, word: str) -> None:
    found = [
        (where, match.group(0))
        for where, text in _all_texts()
        for match in re.finditer(pattern, text, re.IGNORECASE)
    ]
    assert found == [], f"say {word!r}"


def test_the_wrong_sign_has_one_name() -> None:
    # Warning codes and quality gates are identifiers the API returns without listing
    # them in the OpenAPI document: every one about the sign of the price effect starts
    # with wrong_sign.
    import models
    from models.checks import WARNING_CODES as FIT_CODES
    from models.pricing.notes import WARNING_CODES as PRICING_CODES
    from service.core.settings import Settings
    from service.estimation.gates import quality_gates

    product = models.generate_catalogue(7).product("TEA-004")
    fit = models.fit_demand(product.history, models.ModelSpec())
    gates = [g.name for g in quality_gates(fit, None, Settings())]
    names = [*FIT_CODES, *PRICING_CODES, *gates]
    about_sign = [n for n in names if "sign" in n and "significant" not in n]
    assert about_sign and all(n.startswith("wrong_sign") for n in about_sign), about_sign
    assert {"wrong_sign", "wrong_sign_allowed", "wrong_sign_draws"} <= set(names)


def test_recommendations_carry_no_optimiser_fields() -> None:
    schemas = json.loads(OPENAPI_PATH.read_text())["components"]["schemas"]
    for name in ("RecommendationOut", "FamilyRecommendationOut"):
        assert OPTIMISER_FIELDS.isdisjoint(schemas[name]["properties"]), name


def test_the_deny_list_finds_what_it_should() -> None:
    # The checks above are only as good as their patterns: each retired word is caught.
    samples = {
        "nit": "nit 12",
        "revision": "--revision head",
        "holdout": "the holdout weeks",
        "R-squared": "R-squared 0.8",
        "business rule": "within business rules",
    }
    assert LIBRARY_WORDS.search(samples["nit"]) and LIBRARY_WORDS.search(samples["revision"])
    for sample in list(samples.values())[2:]:
        assert any(re.search(p, sample) for p in SYNONYMS), sample
    assert not any(re.search(p, "holdout_wape and hold-out weeks") for p in SYNONYMS)
    for retired in ("--force", '"force": true', "skipped 3", "expected_sign", "draws_wrong_sign"):
        assert any(re.search(p, retired) for p in RETIRED_NAMES), retired
    for kept in ("refit_unchanged", "allow_wrong_sign", "no_active_fit", "wrong_sign_draws"):
        assert not any(re.search(p, kept) for p in RETIRED_NAMES), kept
