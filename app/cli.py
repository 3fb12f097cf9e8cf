"""The ``foldwise`` command: serve the dashboard, run the demo, resend spooled pushes, list a store."""

from __future__ import annotations

import argparse
import sys
import time


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

    args = parser.parse_args(argv)
    return {"serve": _serve, "demo": _demo, "resend": _resend, "list": _list}[args.command](args)


def _server_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--db", help="path or SQLAlchemy URL of the store (default: $FOLDWISE_DB or "
                                     "~/.local/share/foldwise/foldwise.db)")
    parser.add_argument("--host", help="address to bind (default 127.0.0.1: this machine only)")
    parser.add_argument("--port", type=int, help="port (default 8000)")


def _settings(args):
    from foldwise.settings import Settings

    return Settings.from_env(db_url=args.db, host=getattr(args, "host", None), port=getattr(args, "port", None))


def _serve(args) -> int:
    import uvicorn

    from foldwise.web.app import create_app

    settings = _settings(args)
    app = create_app(settings)
    print(f"foldwise dashboard: http://{settings.host}:{settings.port}  (store: {settings.db_url})", flush=True)
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
              f"{row.selection_metric} {row.estimate_mean:.4f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
