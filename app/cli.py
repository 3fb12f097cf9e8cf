"""The ``foldwise`` command: serve the dashboard, run the demo, resend spooled pushes, list a store."""

from __future__ import annotations

import argparse
import sys
import time

from sqlalchemy.engine import make_url


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="foldwise", description=__doc__)
    commands = parser.add_subparsers(dest="command", required=True)

    serve = commands.add_parser("serve", help="serve the dashboard and the JSON API")
    _server_options(serve)

    demo = commands.add_parser("demo", help="run the demo assessments on invented data, store and serve them")
    _server_options(demo)
    demo.add_argument("--no-serve", action="store_true", help="compute and store, then exit")
    demo.add_argument("--fresh", action="store_true", help="compute again even if the store has the demo")
    demo.add_argument("--n-jobs", type=int, default=2)

    resend = commands.add_parser("resend", help="deliver assessments spooled when a server was unreachable")
    resend.add_argument("--spool", help="spool folder (default: $FOLDWISE_SPOOL or ~/.local/state/foldwise/spool)")
    resend.add_argument("--url", help="send to this server instead of the one each was meant for")

    listing = commands.add_parser("list", help="list the assessments in a store")
    listing.add_argument("--db", help="path or SQLAlchemy URL (default: $FOLDWISE_DB)")

    keys = commands.add_parser("keys", help="show, list, create and revoke access keys")
    keys.add_argument("action", choices=["show", "list", "create", "revoke"])
    keys.add_argument("key_id", nargs="?", help="with revoke: the id shown by `foldwise keys list`")
    keys.add_argument("--read", action="store_true", help="with create: a read key (default: a write key)")
    keys.add_argument("--label", default="", help="with create: what the key is for")

    share = commands.add_parser("share", help="print a link that lets a teammate see a page")
    share.add_argument("path", nargs="?", default="/", help="the page, e.g. /assessments/<uuid>?metric=roc_auc")
    share.add_argument("--host", help="the address teammates reach the server at (default 127.0.0.1)")
    share.add_argument("--port", type=int)

    backup = commands.add_parser("backup", help="copy a SQLite store consistently, even while it is served")
    backup.add_argument("dest", help="new file to write")
    backup.add_argument("--db")

    check = commands.add_parser("check", help="integrity check and row counts of a store")
    check.add_argument("--db")

    report = commands.add_parser("report", help="write a self-contained HTML report of one assessment",
                                 description="One HTML file a reviewer can open anywhere, with no network: methods, "
                                             "nested estimate, families, fold winners, the model to ship, failures.")
    report.add_argument("uuid", help="the assessment, as `foldwise list` shows it")
    report.add_argument("-o", "--output", help="file to write (default: report-<uuid>.html)")
    report.add_argument("--db", help="path or SQLAlchemy URL of the store (default: $FOLDWISE_DB)")

    args = parser.parse_args(argv)
    handlers = {"serve": _serve, "demo": _demo, "resend": _resend, "list": _list, "keys": _keys, "share": _share,
                "backup": _backup, "check": _check, "report": _report}
    return handlers[args.command](args)


def _server_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--db", help="path or SQLAlchemy URL of the store (default: $FOLDWISE_DB or "
                                     "~/.local/share/foldwise/foldwise.db)")
    parser.add_argument("--host", help="address to bind (default 127.0.0.1: this machine only)")
    parser.add_argument("--port", type=int, help="port (default 8000)")
    parser.add_argument("--require-read-key", action="store_true", default=None,
                        help="answer reads only with a key (always so on an address other than loopback)")


def _settings(args):
    from foldwise.settings import Settings

    return Settings.from_env(db_url=getattr(args, "db", None), host=getattr(args, "host", None),
                             port=getattr(args, "port", None), require_read_key=getattr(args, "require_read_key", None))


def _serve(args) -> int:
    import uvicorn

    from foldwise.keys import KeyFile
    from foldwise.web.app import create_app

    settings = _settings(args)
    try:
        app = create_app(settings)
    except PermissionError as refusal:
        print(f"foldwise: {refusal}", file=sys.stderr)
        return 2
    write_key = KeyFile(settings.keys_path()).ensure_write_key()
    store = make_url(settings.db_url).render_as_string(hide_password=True)
    print(f"foldwise dashboard: http://{settings.host}:{settings.port}/?key={write_key.secret}\n"
          f"  (this link carries your write key: keep it to yourself; `foldwise share` makes links for teammates)\n"
          f"  store: {store}", flush=True)
    uvicorn.run(app, host=settings.host, port=settings.port, log_level="warning")
    return 0


def _demo(args) -> int:
    from foldwise.demo import run_demo
    from foldwise.store import list_assessments, make_engine

    settings = _settings(args)
    engine = make_engine(settings.db_url)
    stored = list_assessments(engine, dataset="(invented)")
    engine.dispose()
    if args.fresh or stored.empty:
        started = time.perf_counter()
        print("running the demo assessments on invented data (real nested cross-validation)...", flush=True)
        run_demo(settings.db_url, n_jobs=args.n_jobs)
        print(f"demo assessments stored in {time.perf_counter() - started:.0f} s", flush=True)
    else:
        print(f"the store already holds {len(stored)} demo assessments (use --fresh to compute again)")
    return 0 if args.no_serve else _serve(args)


def _resend(args) -> int:
    from foldwise.client import resend

    outcomes = resend(spool_dir=args.spool, url=args.url)
    for name, outcome in outcomes:
        print(f"{name}: {outcome}")
    if not outcomes:
        print("nothing spooled")
    return 0 if all(outcome in ("created", "already stored") for _, outcome in outcomes) else 1


def _keys(args) -> int:
    from foldwise.keys import KeyFile

    keys = KeyFile(_settings(args).keys_path())
    if args.action == "show":
        print(keys.ensure_write_key().secret)
    elif args.action == "create":
        key = keys.create("read" if args.read else "write", label=args.label)
        print(f"{key.kind} key {key.id}: {key.secret}")
    elif args.action == "revoke":
        if not args.key_id:
            print("foldwise keys revoke needs a key id (see `foldwise keys list`)", file=sys.stderr)
            return 2
        try:
            print(f"revoked {keys.revoke(args.key_id).id}")
        except KeyError as error:
            print(f"foldwise: {error.args[0]}", file=sys.stderr)
            return 2
    else:
        for key in keys.all():
            state = "active" if key.active else f"revoked {key.revoked_at}"
            print(f"{key.id}  {key.kind:5}  {state:28}  created {key.created_at}  {key.label}")
    return 0


def _share(args) -> int:
    from foldwise.keys import KeyFile
    from foldwise.web.sharing import share_link

    settings = _settings(args)
    print(share_link(KeyFile(settings.keys_path()), f"http://{settings.host}:{settings.port}", args.path))
    return 0


def _backup(args) -> int:
    from foldwise.store import make_engine
    from foldwise.store.maintenance import backup_to

    engine = make_engine(_settings(args).db_url)
    try:
        print(f"backed up to {backup_to(engine, args.dest)}")
    except (ValueError, FileExistsError) as error:
        print(f"foldwise: {error}", file=sys.stderr)
        return 2
    finally:
        engine.dispose()
    return 0


def _check(args) -> int:
    from foldwise.store import make_engine
    from foldwise.store.maintenance import check_store

    engine = make_engine(_settings(args).db_url)
    report = check_store(engine)
    engine.dispose()
    print(f"integrity: {report.integrity}")
    for table, count in report.counts.items():
        print(f"{table:24} {count:>12,}")
    return 0 if report.ok else 1


def _list(args) -> int:
    from foldwise.store import list_assessments, make_engine

    engine = make_engine(_settings(args).db_url)
    frame = list_assessments(engine)
    engine.dispose()
    if frame.empty:
        print("no assessments")
        return 0
    for row in frame.itertuples():
        print(f"{row.uuid}  {row.created_at:%Y-%m-%d %H:%M}  {row.name}  [{row.dataset or '-'}]  "
              f"{row.selection_metric} {row.estimate_mean:.4f}{_fold_count(row)}")
    return 0


def _report(args) -> int:
    from pathlib import Path

    from foldwise.loading import load
    from foldwise.settings import Settings
    from foldwise.web.report import report_html

    store = args.db or Settings.from_env().db_url
    try:
        assessment = load(store, args.uuid)
    except (LookupError, FileNotFoundError) as error:
        print(f"foldwise: {error}", file=sys.stderr)
        return 2
    output = Path(args.output or f"report-{assessment.uuid}.html")
    output.write_text(report_html(assessment), encoding="utf-8")
    print(f"wrote {output} ({output.stat().st_size:,} bytes)")
    return 0


def _fold_count(row) -> str:
    """Nothing when the estimate used every outer fold; else how many it used, as every page says it."""
    failed = row.estimate_n_folds - row.estimate_n_used
    return f" over {row.estimate_n_used} of {row.estimate_n_folds} outer folds ({failed} failed)" if failed else ""


if __name__ == "__main__":
    sys.exit(main())
