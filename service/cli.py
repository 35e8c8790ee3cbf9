"""The ``linfer`` command: ``linfer serve`` runs the service under gunicorn."""

from __future__ import annotations

import argparse
import os
import sys
from typing import Sequence

__all__ = ["main"]


def _serve(args: argparse.Namespace) -> int:
    if args.bind:
        os.environ["LINFER_BIND"] = args.bind
    if args.workers:
        os.environ["LINFER_WORKERS"] = str(args.workers)
    if args.timeout:
        os.environ["LINFER_TIMEOUT"] = str(args.timeout)
    argv = [sys.executable, "-m", "gunicorn", "-c", "python:service.gunicorn_config",
            "service.app:create_app()"]
    # A fixed argv (this interpreter, gunicorn, the project's config): no caller input.
    os.execv(sys.executable, argv)  # noqa: S606
    return 0  # not reached


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="linfer", description="Linear-regression inference "
                                     "as an HTTP service.")
    sub = parser.add_subparsers(dest="command", required=True)
    serve = sub.add_parser("serve", help="run the service under gunicorn")
    serve.add_argument("--bind", help="HOST:PORT to listen on (default 127.0.0.1:8000, "
                       "or LINFER_BIND)")
    serve.add_argument("--workers", type=int, help="worker processes (default: one per core, "
                       "or LINFER_WORKERS)")
    serve.add_argument("--timeout", type=int, help="seconds before a worker stuck on one "
                       "request is restarted (default 60, or LINFER_TIMEOUT); requests are "
                       "stopped with a problem answer at half of it, or at "
                       "LINFER_MAX_REQUEST_SECONDS")
    serve.set_defaults(handler=_serve)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    return args.handler(args)


if __name__ == "__main__":
    raise SystemExit(main())
