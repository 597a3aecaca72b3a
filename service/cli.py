"""The `marginal` command line: database, serving, demo data, keys and the OpenAPI file."""

from __future__ import annotations

import argparse
import contextlib
import json
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from service.core.settings import Settings, get_settings

OPENAPI_PATH = Path(__file__).resolve().parent.parent / "openapi" / "openapi.json"


def _schema(args: argparse.Namespace, settings: Settings) -> int:
    from service.core import migrate

    if args.action == "apply":
        migrate.upgrade(settings, migrate.step_revision(settings, args.to or "latest"))
    elif args.action == "undo":
        migrate.downgrade(settings, migrate.step_revision(settings, args.to))
    else:
        from service.core.db import make_engine

        engine = make_engine(settings)
        try:
            print(migrate.current_revision(engine) or "empty (no schema step applied)")
        finally:
            engine.dispose()
    return 0


def _serve(args: argparse.Namespace, settings: Settings) -> int:
    import uvicorn

    from service.core import logs

    logs.configure(settings.log_level)
    uvicorn.run(
        "service.core.app:create_app",
        factory=True,
        host=args.host or settings.host,
        port=args.port or settings.port,
        workers=args.workers or settings.workers,
        log_level=settings.log_level,
        log_config=None,
        proxy_headers=False,
    )
    return 0


def _demo(args: argparse.Namespace, settings: Settings) -> int:
    from service.catalogue import demo

    summary = demo.load(settings, seed=args.seed)
    print(
        f"demo catalogue loaded: {summary.products} products, {summary.observations} "
        f"observations ({summary.inserted} new, {summary.updated} replaced, "
        f"{summary.unchanged} unchanged)"
    )
    return 0


def _keys(args: argparse.Namespace, settings: Settings) -> int:
    from service.access import auth
    from service.core.audit import write_audit
    from service.core.db import make_engine, make_session_factory, session_scope

    engine = make_engine(settings)
    factory = make_session_factory(engine, writer=True)
    try:
        with session_scope(factory) as session:
            if args.action == "create":
                new = auth.create_key(session, name=args.name, scopes=args.scope)
                write_audit(
                    session,
                    actor_key_id=None,
                    action="create_api_key",
                    subject=f"key:{new.row.id}",
                    details={
                        "name": args.name,
                        "scopes": list(new.row.scopes),
                        "by": "command line",
                    },
                )
                scopes = ", ".join(new.row.scopes)
                print(f"created key {new.row.id} ({args.name}) with scopes {scopes}")
                print("store the secret now; it is not shown again:")
                print(new.secret)
            elif args.action == "list":
                print("id\tname\tscopes\tstate\tlast used")
                for row in auth.list_keys(session):
                    state = "revoked" if row.revoked_at else "active"
                    used = row.last_used_at.isoformat() if row.last_used_at else "never"
                    print(f"{row.id}\t{row.name}\t{','.join(row.scopes)}\t{state}\t{used}")
            else:
                auth.revoke_key(session, key_id=args.key_id)
                write_audit(
                    session,
                    actor_key_id=None,
                    action="revoke_api_key",
                    subject=f"key:{args.key_id}",
                    details={"by": "command line"},
                )
                print(f"revoked key {args.key_id}")
    finally:
        engine.dispose()
    return 0


def _json_option(args: argparse.Namespace, name: str) -> dict[str, Any] | None:
    """A JSON object given on the command line, or a one-line refusal."""
    text = getattr(args, name, None)
    if text is None:
        return None
    try:
        value = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CommandError(f"--{name} is not JSON: {exc}") from None
    if not isinstance(value, dict):
        raise CommandError(f"--{name} must be a JSON object, in braces")
    return value


def _scope(args: argparse.Namespace) -> object:
    if args.family:
        return {"family": args.family}
    if args.sku:
        return {"skus": args.sku}
    return "all"


def _run_job(args: argparse.Namespace, settings: Settings) -> int:
    """Create a job and run it here, with a progress bar on a terminal."""
    from service.core.db import make_engine, make_session_factory, session_scope
    from service.jobs import queue as job_store
    from service.jobs import submit
    from service.jobs.progress import JobProgressDisplay, print_summary
    from service.jobs.worker import JobRunner

    request = _json_option(args, "request")
    spec = _json_option(args, "spec")
    on_cluster = _on_cluster(args, settings)
    if on_cluster is None:
        return 2
    settings = on_cluster
    engine = make_engine(settings)
    try:
        with session_scope(make_session_factory(engine, writer=True)) as session:
            job_id = submit.submit(
                session,
                kind=args.command,
                scope=_scope(args),
                refit_unchanged=getattr(args, "refit_unchanged", False),
                spec=spec,
                request=request,
            ).id
        runner = JobRunner(engine, settings)
        runner.claim(job_id)
        with JobProgressDisplay(f"{args.command} job {job_id}") as display:
            status = runner.run(
                job_id,
                on_progress=display.update,
                announce=display.note,
            )
        with session_scope(make_session_factory(engine, writer=False)) as session:
            row = job_store.get_or_raise(session, job_id=job_id)
            print_summary(row)
            failed = (row.counts or {}).get("failed", 0)
    finally:
        engine.dispose()
    return 0 if status == job_store.SUCCEEDED and failed == 0 else 1


def _on_cluster(args: argparse.Namespace, settings: Settings) -> Settings | None:
    """The settings with ``--cluster`` applied; None (said why) if they cannot be used."""
    from pydantic import ValidationError

    from service.core.errors import ClusterUnavailable
    from service.jobs.cluster import check_database

    try:
        if args.cluster is not None:
            settings = Settings.model_validate({**settings.model_dump(), "cluster": args.cluster})
        if settings.cluster:
            check_database(settings)
    except ValidationError:
        print(
            f"--cluster {args.cluster!r}: expected tcp://HOST:PORT, local:N or empty",
            file=sys.stderr,
        )
        return None
    except ClusterUnavailable as exc:
        print(exc.detail, file=sys.stderr)
        return None
    return settings


def _jobs(args: argparse.Namespace, settings: Settings) -> int:
    from service.core.db import make_engine, make_session_factory, session_scope
    from service.jobs import queue as job_store
    from service.jobs.progress import print_job_list

    engine = make_engine(settings)
    try:
        with session_scope(make_session_factory(engine, writer=False)) as session:
            rows, _ = job_store.list_page(session, limit=args.limit, before_id=None)
            print_job_list(rows)
    finally:
        engine.dispose()
    return 0


def _worker(args: argparse.Namespace, settings: Settings) -> int:
    """Run queued jobs (and scheduled slots) until interrupted."""
    import datetime as dt
    import signal
    import threading

    from service.core import logs
    from service.core.db import make_engine, make_session_factory
    from service.jobs import schedules
    from service.jobs.worker import JobRunner, Worker

    logs.configure(settings.log_level)
    on_cluster = _on_cluster(args, settings)
    if on_cluster is None:
        return 2
    settings = on_cluster
    engine = make_engine(settings)
    runner = JobRunner(engine, settings)
    runner.recover(dt.timedelta(seconds=settings.job_stale_seconds))
    threads: list[Worker | schedules.Scheduler] = [
        Worker(runner, poll_seconds=settings.worker_poll_seconds)
    ]
    if settings.scheduler_enabled and not args.no_scheduler:
        threads.append(
            schedules.Scheduler(
                make_session_factory(engine, writer=True),
                tick_seconds=settings.scheduler_tick_seconds,
            )
        )
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    for thread in threads:
        thread.start()
    with contextlib.suppress(KeyboardInterrupt):
        stop.wait()
    for thread in threads:
        thread.stop()
    engine.dispose()
    return 0


def _report(args: argparse.Namespace, settings: Settings) -> int:
    """Write the analyst pages and charts as a static folder, with progress."""
    from service.ui.report import write_report

    summary = write_report(settings, Path(args.out), family=args.family)
    print(
        f"wrote {summary.pages} pages and {summary.charts} charts for {summary.products} "
        f"products to {summary.out}"
    )
    for sku, reason in summary.failed.items():
        print(f"{sku}: page not made: {reason}", file=sys.stderr)
    return 1 if summary.failed else 0


def openapi_document() -> str:
    from service.core.app import create_app

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


def _cluster_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--cluster",
        metavar="ADDRESS",
        help="run jobs on a Dask cluster: tcp://HOST:8786 (a running scheduler) or local:N "
        "(N worker processes started here for each job); empty: in this process. "
        "Default: MARGINAL_CLUSTER. PostgreSQL only",
    )


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="marginal", description=__doc__)
    commands = parser.add_subparsers(dest="command", required=True)

    schema = commands.add_parser(
        "schema", help="bring the database's tables to a schema step, or show its step"
    )
    steps = schema.add_subparsers(dest="action", required=True)
    apply = steps.add_parser("apply", help="apply the schema steps up to the latest (or --to)")
    apply.add_argument("--to", help="a step id such as 0003 (default: latest)")
    undo = steps.add_parser("undo", help="undo schema steps back to --to")
    undo.add_argument(
        "--to", required=True, help="the step to keep, such as 0003, or 'empty' for no tables"
    )
    steps.add_parser("show", help="print the step the database is at")
    schema.set_defaults(run=_schema)

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
        choices=["read", "write", "admin", "approve"],
        help="repeat for several scopes",
    )
    key_actions.add_parser("list", help="list keys (never secrets)")
    revoke = key_actions.add_parser("revoke", help="revoke a key by id")
    revoke.add_argument("key_id")
    keys.set_defaults(run=_keys)

    for kind, text in (("refit", "refit demand models"), ("reprice", "recommend prices")):
        job = commands.add_parser(kind, help=f"{text} for all products, a family or skus")
        which = job.add_mutually_exclusive_group()
        which.add_argument("--all", action="store_true", help="every product (the default)")
        which.add_argument("--family", help="one family")
        which.add_argument("--sku", action="append", help="a sku; repeat for several")
        if kind == "refit":
            job.add_argument(
                "--refit-unchanged",
                action="store_true",
                help="also products whose history has not changed (needed with --spec)",
            )
            job.add_argument("--spec", help="one model spec (JSON) for every product")
        else:
            job.add_argument("--request", help="optimal-price request body (JSON) for each")
        _cluster_option(job)
        job.set_defaults(run=_run_job)

    listing = commands.add_parser("jobs", help="list recent jobs")
    listing.add_argument("--limit", type=int, default=20)
    listing.set_defaults(run=_jobs)

    worker = commands.add_parser("worker", help="run queued and scheduled jobs until stopped")
    worker.add_argument(
        "--no-scheduler",
        action="store_true",
        help="only run jobs; let other processes start scheduled slots",
    )
    _cluster_option(worker)
    worker.set_defaults(run=_worker)

    report = commands.add_parser(
        "report", help="write the analyst pages and charts as a static folder"
    )
    report.add_argument("--out", required=True, help="folder to write (created if missing)")
    report.add_argument("--family", help="only this family's products")
    report.set_defaults(run=_report)

    openapi = commands.add_parser("openapi", help="write the OpenAPI document")
    openapi.add_argument("--out", default=str(OPENAPI_PATH))
    openapi.add_argument("--check", action="store_true", help="fail if the file is stale")
    openapi.set_defaults(run=_openapi)
    return parser


class CommandError(Exception):
    """A mistake on the command line, told in one line."""


def main(argv: Sequence[str] | None = None) -> int:
    from service.core.errors import ServiceError

    args = build_parser().parse_args(argv)
    try:
        code: int = args.run(args, get_settings())
    except (CommandError, ServiceError) as exc:
        where = "; ".join(f"{e.field}: {e.message}" for e in getattr(exc, "errors", []) if e.field)
        print(f"marginal: error: {exc}" + (f" ({where})" if where else ""), file=sys.stderr)
        return 2
    return code


if __name__ == "__main__":
    sys.exit(main())
