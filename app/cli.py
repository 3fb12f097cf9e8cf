"""The ``foldwise`` command: serve the dashboard, run the demo, resend spooled pushes, list a store."""

from __future__ import annotations

import argparse
import math
import os
import signal
import socket
import sys
import time
from pathlib import Path
from urllib.parse import urlsplit

import foldwise

_DEMO_STORE = ".foldwise/demo.db"  # where `make demo` keeps its store, relative to the checkout
_DEFAULT_STORE = "$FOLDWISE_DB, else ~/.local/share/foldwise/foldwise.db"
_DB_HELP = f"path or SQLAlchemy URL of the store (default: {_DEFAULT_STORE})"


class Refusal(Exception):
    """A request the command cannot carry out; its text says why and what to do instead."""


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    args = parser.parse_args(argv)
    try:
        return args.handler(args)
    except KeyboardInterrupt:
        return 130
    except Exception as error:  # every failure is a message, never a traceback
        if os.environ.get("FOLDWISE_DEBUG"):
            raise
        print(f"foldwise {args.command}: {_explain(error)}", file=sys.stderr)
        return 2 if _misuse(error) else 1


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="foldwise", description=(
        "Keep, browse and compare every score of a nested cross-validation: serve the dashboard, run the "
        "demo, resend spooled pushes, and list, check, back up or report on a store."))
    parser.add_argument("--version", action="version", version=f"foldwise {foldwise.__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def command(name, handler, summary, description):
        sub = commands.add_parser(name, help=summary, description=description)
        sub.set_defaults(handler=handler)
        return sub

    serve = command("serve", _serve, "serve the dashboard and the JSON API",
                    "Serve the dashboard and the JSON API over a store that exists (--create makes a new one). "
                    "Prints the dashboard's link with your write key; `foldwise share` finds the server.")
    _server_options(serve)
    serve.add_argument("--create", action="store_true", help="start a new, empty store when --db names none yet")

    demo = command("demo", _demo, "run the demo assessments on invented data, store and serve them",
                   "Run real nested cross-validations on invented data with a fixed seed, store them "
                   "(creating the store if needed) and serve the dashboard. `make demo` keeps its store in "
                   f"{_DEMO_STORE}.")
    _server_options(demo)
    demo.add_argument("--no-serve", action="store_true", help="compute and store, then exit")
    demo.add_argument("--fresh", action="store_true", help="compute again even if the store has the demo")
    demo.add_argument("--n-jobs", type=int, default=2, help="parallel fits (default 2)")

    resend = command("resend", _resend, "deliver assessments spooled when a server was unreachable or failing",
                     "Send every assessment a push left in the spool folder because its server could not be "
                     "reached or answered a server error, and remove those that arrived.")
    resend.add_argument("--spool", help="spool folder (default: $FOLDWISE_SPOOL or ~/.local/state/foldwise/spool)")
    resend.add_argument("--url", help="send to this server instead of the one each was meant for")

    listing = command("list", _list, "list the assessments in a store",
                      "List a store's assessments, newest first: uuid, time (UTC), name, dataset, selection "
                      "metric and nested estimate.")
    listing.add_argument("--db", help=_DB_HELP, metavar="PATH_OR_URL")

    keys = command("keys", _keys, "show, list, create and revoke access keys",
                   "The write key (pushes, saving ensembles) and read keys for visitors, kept in keys.json in "
                   "the config folder ($FOLDWISE_CONFIG, else ~/.config/foldwise).")
    keys.add_argument("action", choices=["show", "list", "create", "revoke"],
                      help="show the write key, list all keys, create one, or revoke one")
    keys.add_argument("key_id", nargs="?", help="with revoke: the id shown by `foldwise keys list`")
    keys.add_argument("--read", action="store_true", help="with create: a read key (default: a write key)")
    keys.add_argument("--label", default="", help="with create: what the key is for")

    share = command("share", _share, "print a link that lets a teammate see a page",
                    "Print a link to a page of the running dashboard carrying a read key, so a teammate sees "
                    "the same view. The server is the one `foldwise serve` started with this config folder, "
                    "unless --url names another.")
    share.add_argument("path", nargs="?", default="/",
                       help="the page's path and query, e.g. /assessments/<uuid>?metric=roc_auc (default /)")
    share.add_argument("--url", help="the server's address, e.g. http://127.0.0.1:8001 (default: the running one)")
    share.add_argument("--host", help="the name or address teammates reach the server at, in place of the one "
                                      "it is bound to")

    backup = command("backup", _backup, "copy a SQLite store consistently, even while it is served",
                     "Copy a SQLite store with SQLite's online backup, consistent even while a server writes "
                     "to it. PostgreSQL stores are backed up with pg_dump.")
    backup.add_argument("dest", help="new file to write (an existing file is never overwritten)")
    backup.add_argument("--db", help=_DB_HELP, metavar="PATH_OR_URL")

    check = command("check", _check, "integrity check and row counts of a store",
                    "Run the database's integrity check and count the rows of every table; exits 1 when the "
                    "check finds a problem.")
    check.add_argument("--db", help=_DB_HELP, metavar="PATH_OR_URL")

    report = command("report", _report, "write a self-contained HTML report of one assessment",
                     "One HTML file a reviewer can open anywhere, with no network: methods, nested estimate, "
                     "families, fold winners, the model to ship, failures.")
    report.add_argument("uuid", help="the assessment, as `foldwise list` shows it")
    report.add_argument("-o", "--output", help="file to write (default: report-<uuid>.html)")
    report.add_argument("--db", help=_DB_HELP, metavar="PATH_OR_URL")
    return parser


def _server_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--db", help=_DB_HELP, metavar="PATH_OR_URL")
    parser.add_argument("--host", help="address to bind (default 127.0.0.1: this machine only)")
    parser.add_argument("--port", type=_port, help="port (default 8000; 0 picks a free one)")
    parser.add_argument("--require-read-key", action="store_true", default=None,
                        help="answer reads only with a key (always so on an address other than loopback)")


def _port(text: str) -> int:
    if not text.isdigit() or int(text) > 65535:
        raise argparse.ArgumentTypeError(f"{text!r} is not a port: give a whole number from 1 to 65535 "
                                         "(0: any free port)")
    return int(text)


def _settings(args):
    from foldwise.settings import Settings

    return Settings.from_env(db_url=getattr(args, "db", None), host=getattr(args, "host", None),
                             port=getattr(args, "port", None), require_read_key=getattr(args, "require_read_key", None))


def _existing_store(args):
    """Settings whose store exists; a missing SQLite file is refused by name rather than created empty."""
    from sqlalchemy.engine import make_url

    from foldwise.store import default_db_url

    given = getattr(args, "db", None) or os.environ.get("FOLDWISE_DB")
    location = given or default_db_url(os.environ)
    if "://" in location:
        url = make_url(location)
        if url.get_backend_name() != "sqlite" or url.database in (None, "", ":memory:"):
            return _settings(args)
        path = Path(url.database)
    else:
        path = Path(location)
    if path.expanduser().is_file():
        return _settings(args)
    if path.expanduser().exists():
        raise Refusal(f"{path} is not a store file (it is a folder)")
    default = Path(make_url(default_db_url(os.environ)).database)
    lines = [f"no store at {path.expanduser().resolve()}; nothing was created.",
             f"  The store is --db, else {_DEFAULT_STORE} (here {default})."]
    if not given:
        lines.append(_demo_hint(args.command))
    lines.append("  `foldwise serve --create` starts a new, empty store; `foldwise demo` one with the demo "
                 "assessments.")
    raise Refusal("\n".join(lines))


def _demo_hint(command: str) -> str:
    if Path(_DEMO_STORE).is_file():
        return f"  The demo's store is here: foldwise {command} --db {_DEMO_STORE}"
    return f"  `make demo` keeps the demo's store in {_DEMO_STORE} of the checkout it runs in."


def _misuse(error: BaseException) -> bool:
    """Whether the command line asked for something impossible (exit 2, as argparse's own errors)."""
    from sqlalchemy.exc import ArgumentError

    return isinstance(error, (Refusal, ArgumentError))


def _explain(error: BaseException) -> str:
    """One readable line or paragraph for a failure, whatever raised it."""
    from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError

    if isinstance(error, NoSuchModuleError):
        return (f"{error}: --db takes a file path or a SQLAlchemy URL such as sqlite:///runs.db or "
                "postgresql+psycopg://user@host/db")
    if isinstance(error, ArgumentError):
        return f"{error}; --db takes a file path or a SQLAlchemy URL such as sqlite:///runs.db"
    if isinstance(error, DBAPIError):
        cause = str(error.orig).strip().splitlines()
        return f"the store could not be opened: {cause[0] if cause else type(error.orig).__name__}"
    if isinstance(error, (Refusal, OSError, ValueError, LookupError, PermissionError)):
        return str(error) or type(error).__name__
    return (f"unexpected {type(error).__name__}: {error} (run again with FOLDWISE_DEBUG=1 to see where, "
            "and report it)")


def _serve(args, *, create: bool | None = None) -> int:
    import uvicorn
    from sqlalchemy.engine import make_url

    from foldwise.keys import KeyFile
    from foldwise.running_server import RunningServer, announce, withdraw
    from foldwise.web.app import create_app

    settings = _settings(args) if (args.create if create is None else create) else _existing_store(args)
    try:
        app = create_app(settings)
    except PermissionError as refusal:
        raise Refusal(str(refusal)) from None
    try:
        listener = _bind(settings.host, settings.port)
    except Refusal:
        app.state.engine.dispose()
        raise
    port = listener.getsockname()[1]
    host = f"[{settings.host}]" if ":" in settings.host else settings.host
    url = f"http://{host}:{port}"
    store = make_url(settings.db_url).render_as_string(hide_password=True)
    write_key = KeyFile(settings.keys_path()).ensure_write_key()
    config_dir = settings.keys_path().parent
    announce(config_dir, RunningServer(url=url, pid=os.getpid(), store=store))
    print(f"foldwise dashboard: {url}/?key={write_key.secret}\n"
          f"  (this link carries your write key: keep it to yourself; `foldwise share` makes links for teammates)\n"
          f"  store: {store}", flush=True)
    # uvicorn shuts down gracefully on SIGTERM, then raises it again: exit then, through the finally below.
    signal.signal(signal.SIGTERM, _stop)
    try:
        uvicorn.Server(uvicorn.Config(app, log_level="warning")).run(sockets=[listener])
    finally:
        withdraw(config_dir, os.getpid())
        listener.close()
    return 0


def _stop(_signal, _frame) -> None:
    raise SystemExit(0)


def _bind(host: str, port: int) -> socket.socket:
    """The listening socket, bound here so that a busy port is a message, not a log line and exit."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    listener = socket.socket(family, socket.SOCK_STREAM)
    listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        listener.bind((host.strip("[]"), port))
    except OSError as error:
        listener.close()
        reason = "is in use (another server?)" if error.errno in (98, 48) else f"cannot be bound ({error.strerror})"
        raise Refusal(f"port {port} on {host} {reason}; choose another with --port "
                      "(`make demo PORT=8001` for the demo)") from None
    listener.listen(2048)
    return listener


def _demo(args) -> int:
    from foldwise.demo import run_demo
    from foldwise.store import list_assessments, make_engine

    settings = _settings(args)
    if not args.no_serve:
        _bind(settings.host, settings.port).close()  # a busy port is said before minutes of computing
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
    return 0 if args.no_serve else _serve(args, create=True)


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
            raise Refusal("revoke needs a key id (see `foldwise keys list`)")
        try:
            print(f"revoked {keys.revoke(args.key_id).id}")
        except KeyError as error:
            raise Refusal(error.args[0]) from None
    else:
        for key in keys.all():
            state = "active" if key.active else f"revoked {key.revoked_at}"
            print(f"{key.id}  {key.kind:5}  {state:28}  created {key.created_at}  {key.label}")
    return 0


def _share(args) -> int:
    from foldwise.keys import KeyFile
    from foldwise.running_server import STATE_NAME, find_running
    from foldwise.web.sharing import share_link

    given = urlsplit(args.path)
    if given.scheme or given.netloc:
        page = (given.path or "/") + (f"?{given.query}" if given.query else "")
        raise Refusal(f"share takes the page's path, not a whole URL: foldwise share '{page}'"
                      + ("" if args.url else f" --url {given.scheme}://{given.netloc}"))
    settings = _settings(args)
    if args.url:
        base = urlsplit(args.url)
        if base.scheme not in ("http", "https") or not base.netloc:
            raise Refusal(f"--url takes the server's address such as http://127.0.0.1:8000; received {args.url!r}")
    else:
        running = find_running(settings.keys_path().parent)
        if running is None:
            raise Refusal(f"no running foldwise server found ({settings.keys_path().parent / STATE_NAME} "
                          "names none that is alive): start `foldwise serve`, or give its address with --url")
        base = urlsplit(running.url)
    if args.host:
        host = f"[{args.host}]" if ":" in args.host else args.host
        base = base._replace(netloc=host + (f":{base.port}" if base.port else ""))
    print(share_link(KeyFile(settings.keys_path()), f"{base.scheme}://{base.netloc}", args.path))
    return 0


def _backup(args) -> int:
    from foldwise.store import make_engine
    from foldwise.store.maintenance import backup_to

    engine = make_engine(_existing_store(args).db_url)
    try:
        print(f"backed up to {backup_to(engine, args.dest)}")
    finally:
        engine.dispose()
    return 0


def _check(args) -> int:
    from foldwise.store import make_engine
    from foldwise.store.maintenance import check_store

    engine = make_engine(_existing_store(args).db_url)
    try:
        report = check_store(engine)
    finally:
        engine.dispose()
    print(f"integrity: {report.integrity}")
    for table, count in report.counts.items():
        print(f"{table:24} {count:>12,}")
    return 0 if report.ok else 1


def _list(args) -> int:
    from sqlalchemy.engine import make_url

    from foldwise.store import list_assessments, make_engine

    settings = _existing_store(args)
    engine = make_engine(settings.db_url)
    try:
        frame = list_assessments(engine)
    finally:
        engine.dispose()
    if frame.empty:
        store = make_url(settings.db_url).render_as_string(hide_password=True)
        print(f"no assessments in {store}" + ("" if args.db or os.environ.get("FOLDWISE_DB") else
                                               f" (the default store)\n{_demo_hint('list')}"))
        return 0
    for row in frame.itertuples():
        print(f"{row.uuid}  {row.created_at:%Y-%m-%d %H:%M}  {row.name}  [{_text(row.dataset)}]  "
              f"{row.selection_metric} {_number(row.estimate_mean)}{_fold_count(row)}")
    return 0


def _report(args) -> int:
    from foldwise.loading import load
    from foldwise.web.report import report_html

    try:
        assessment = load(_existing_store(args).db_url, args.uuid)
    except (LookupError, FileNotFoundError) as error:
        raise Refusal(str(error.args[0] if error.args else error)) from None
    output = Path(args.output or f"report-{assessment.uuid}.html")
    output.write_text(report_html(assessment), encoding="utf-8")
    print(f"wrote {output} ({output.stat().st_size:,} bytes)")
    return 0


def _fold_count(row) -> str:
    """Nothing when the estimate used every outer fold; else how many it used, as every page says it."""
    failed = row.estimate_n_folds - row.estimate_n_used
    return f" over {row.estimate_n_used} of {row.estimate_n_folds} outer folds ({failed} failed)" if failed else ""


def _text(value) -> str:
    return "—" if value is None or (isinstance(value, float) and math.isnan(value)) or value == "" else str(value)


def _number(value) -> str:
    return "—" if value is None or math.isnan(value) else f"{value:.4f}"


if __name__ == "__main__":
    sys.exit(main())
