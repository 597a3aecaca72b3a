"""The `marginal` command line: database, serving, demo data, keys and the OpenAPI file."""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from pathlib import Path

from service.settings import Settings, get_settings

OPENAPI_PATH = Path(__file__).resolve().parent.parent / "openapi" / "openapi.json"


def _db(args: argparse.Namespace, settings: Settings) -> int:
    from service import migrate

    if args.action == "upgrade":
        migrate.upgrade(settings, args.revision or "head")
    elif args.action == "downgrade":
        migrate.downgrade(settings, args.revision or "base")
    else:
        from service.db import make_engine

        engine = make_engine(settings)
        print(migrate.current_revision(engine) or "(empty database)")
        engine.dispose()
    return 0


def _serve(args: argparse.Namespace, settings: Settings) -> int:
    import uvicorn

    uvicorn.run(
        "service.app:create_app",
        factory=True,
        host=args.host or settings.host,
        port=args.port or settings.port,
        workers=args.workers or settings.workers,
        log_level=settings.log_level,
        proxy_headers=False,
    )
    return 0


def _demo(args: argparse.Namespace, settings: Settings) -> int:
    from service import demo

    summary = demo.load(settings, seed=args.seed)
    print(
        f"demo catalogue loaded: {summary.products} products, "
        f"{summary.observations} observations ({summary.inserted} new, {summary.updated} replaced)"
    )
    return 0


def _keys(args: argparse.Namespace, settings: Settings) -> int:
    from service import auth
    from service.db import make_engine, make_session_factory, session_scope

    engine = make_engine(settings)
    factory = make_session_factory(engine, writer=True)
    try:
        with session_scope(factory) as session:
            if args.action == "create":
                new = auth.create_key(session, name=args.name, scopes=args.scope)
                scopes = ", ".join(new.row.scopes)
                print(f"created key {new.row.id} ({args.name}) with scopes {scopes}")
                print("store the secret now; it is not shown again:")
                print(new.secret)
            elif args.action == "list":
                for row in auth.list_keys(session):
                    state = "revoked" if row.revoked_at else "active"
                    used = row.last_used_at.isoformat() if row.last_used_at else "never"
                    print(
                        f"{row.id}\t{row.name}\t{','.join(row.scopes)}\t{state}\tlast used {used}"
                    )
            else:
                auth.revoke_key(session, key_id=args.key_id)
                print(f"revoked key {args.key_id}")
    finally:
        engine.dispose()
    return 0


def openapi_document() -> str:
    from service.app import create_app

    app = create_app(Settings(database_url="sqlite:///:memory:"))
    return json.dumps(app.openapi(), indent=2, sort_keys=True) + "\n"


def _openapi(args: argparse.Namespace, settings: Settings) -> int:
    document = openapi_document()
    out = Path(args.out)
    if args.check:
        if not out.exists() or out.read_text() != document:
            print(f"{out} is stale: run `marginal openapi`", file=sys.stderr)
            return 1
        print(f"{out} is up to date")
        return 0
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(document)
    print(f"wrote {out}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="marginal", description=__doc__)
    commands = parser.add_subparsers(dest="command", required=True)

    db = commands.add_parser("db", help="apply or inspect schema migrations")
    db.add_argument("action", choices=["upgrade", "downgrade", "current"])
    db.add_argument("--revision", help="target revision (upgrade: head; downgrade: base)")
    db.set_defaults(run=_db)

    serve = commands.add_parser("serve", help="serve the HTTP API")
    serve.add_argument("--host")
    serve.add_argument("--port", type=int)
    serve.add_argument("--workers", type=int)
    serve.set_defaults(run=_serve)

    demo = commands.add_parser("demo", help="load the demo tea-shop catalogue (idempotent)")
    demo.add_argument("--seed", type=int, default=7)
    demo.set_defaults(run=_demo)

    keys = commands.add_parser("keys", help="create, list or revoke API keys")
    key_actions = keys.add_subparsers(dest="action", required=True)
    create = key_actions.add_parser("create", help="create a key; the secret is the last line")
    create.add_argument("--name", required=True)
    create.add_argument(
        "--scope",
        action="append",
        required=True,
        choices=["read", "write", "admin"],
        help="repeat for several scopes",
    )
    key_actions.add_parser("list", help="list keys (never secrets)")
    revoke = key_actions.add_parser("revoke", help="revoke a key by id")
    revoke.add_argument("key_id")
    keys.set_defaults(run=_keys)

    openapi = commands.add_parser("openapi", help="write the OpenAPI document")
    openapi.add_argument("--out", default=str(OPENAPI_PATH))
    openapi.add_argument("--check", action="store_true", help="fail if the file is stale")
    openapi.set_defaults(run=_openapi)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    code: int = args.run(args, get_settings())
    return code


if __name__ == "__main__":
    sys.exit(main())
