"""Schema migrations through Alembic: the only way the schema is created or changed."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine

from service.core.errors import InvalidInput
from service.core.settings import Settings

# Inside the package, so an installed wheel (the container image) can migrate too.
MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"


def alembic_config(settings: Settings) -> Config:
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    config.attributes["settings"] = settings
    return config


def step_revision(settings: Settings, step: str) -> str:
    """A schema step as the users name it (``latest``, ``empty`` or a step id such as
    ``0003``) as the migration tool's revision; unknown steps are invalid input."""
    if step == "latest":
        return "head"
    if step == "empty":
        return "base"
    known = [
        s.revision for s in ScriptDirectory.from_config(alembic_config(settings)).walk_revisions()
    ]
    if step not in known:
        raise InvalidInput(
            f"no schema step {step!r}; the steps are {', '.join(sorted(known))}, "
            "'latest' and 'empty'"
        )
    return step


def upgrade(settings: Settings, revision: str = "head") -> None:
    command.upgrade(alembic_config(settings), revision)


def downgrade(settings: Settings, revision: str = "base") -> None:
    command.downgrade(alembic_config(settings), revision)


def head_revision(settings: Settings) -> str | None:
    return ScriptDirectory.from_config(alembic_config(settings)).get_current_head()


def current_revision(engine: Engine) -> str | None:
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()
