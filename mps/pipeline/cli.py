"""Command line ``chargewise`` (also ``python -m mps``): parse the verb, dispatch, map errors to exit codes.

Exit codes: 0 success; 2 bad input (a refused config field, a bad path or option: one line on
stderr naming it, never a traceback); 1 a failure: a run that cannot go on (disk full, a non-finite
number; one line, the last checkpoint kept), an internal error (one line; the traceback too when the
environment variable ``CHARGEWISE_DEBUG`` is set), or for ``scan``: some points failed, each
recorded in scan.csv; 3 stopped by Ctrl-C or SIGTERM, resumable (``chargewise resume`` / the same
``chargewise scan`` again). Every verb except ``check``
is carried out by :mod:`mps.pipeline.runner`, imported only when that verb is used.
"""

from __future__ import annotations

import argparse
import importlib
import math
import os
import signal
import sys
import threading
import traceback
from collections.abc import Callable, Sequence
from typing import Any

from mps import __version__
from mps.pipeline.config import load_config, load_mapping
from mps.pipeline.errors import InputError, RunFailure
from mps.pipeline.schema import dump_config
from mps.pipeline.signals import EXIT_STOPPED

PROG = "chargewise"


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with ``argv`` (default ``sys.argv[1:]``) and return the exit code."""
    parser = build_parser()
    _sigterm_like_ctrl_c()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, usage errors (argparse exits 2)
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 2)
    try:
        return args.handler(args)
    except InputError as exc:
        _say(str(exc))
        return 2
    except RunFailure as exc:
        _say(str(exc))
        return 1
    except KeyboardInterrupt:
        _say("interrupted")
        return EXIT_STOPPED
    except Exception as exc:  # noqa: BLE001 -- last line of defence: one line, exit 1
        lines = str(exc).strip().splitlines()
        detail = f": {lines[0]}" if lines else ""
        if os.environ.get("CHARGEWISE_DEBUG"):
            _say(f"internal error ({type(exc).__name__}{detail})")
            traceback.print_exc()
        else:
            _say(
                f"internal error ({type(exc).__name__}{detail}); "
                "set CHARGEWISE_DEBUG=1 to see the traceback"
            )
        return 1


def _sigterm_like_ctrl_c() -> None:
    """Outside a run's own handling (see mps.pipeline.signals) SIGTERM stops like Ctrl-C: one line,
    exit code 3, every file either old or new (all writes are atomic)."""
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, signal.default_int_handler)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with one sub-command per verb."""
    parser = argparse.ArgumentParser(
        prog=PROG,
        description="Ground states of U(1)-symmetric chains as matrix-product states and "
        "their charge-resolved entanglement.",
    )
    parser.add_argument("--version", action="version", version=f"{PROG} {__version__}")
    verbs = parser.add_subparsers(dest="verb", metavar="VERB", required=True)

    p = verbs.add_parser("run", help="ground state, analysis, comparison and plots for a config")
    p.add_argument("config", metavar="CONFIG", help="YAML config file")
    p.add_argument("--out", metavar="DIR", help="run directory (default: output.dir of the config)")
    p.set_defaults(handler=lambda a: _dispatch("run", "run", a.config, out=a.out))

    p = verbs.add_parser("resume", help="continue a run from its last checkpoint")
    p.add_argument("directory", metavar="DIR", help="run directory")
    p.set_defaults(handler=lambda a: _dispatch("resume", "resume", a.directory))

    p = verbs.add_parser("analyze", help="recompute the entanglement tables from the stored state")
    p.add_argument("directory", metavar="DIR", help="run directory")
    p.add_argument("--renyi", type=_renyi_list, metavar="N,N,...",
                   help="Renyi indices, e.g. 1,2,3,inf (default: from the config)")
    p.add_argument("--cuts", type=_cut_list, metavar="L,L,...",
                   help="left-block sizes, e.g. 1,5,9 (default: from the config)")
    p.set_defaults(
        handler=lambda a: _dispatch("analyze", "analyze", a.directory, renyi=a.renyi, cuts=a.cuts)
    )

    p = verbs.add_parser("compare", help="redo fits, theory curves and plots")
    p.add_argument("directory", metavar="DIR", help="run directory")
    p.set_defaults(handler=lambda a: _dispatch("compare", "compare", a.directory))

    p = verbs.add_parser("scan", help="run a grid of parameters")
    p.add_argument("config", metavar="CONFIG", help="YAML config file with the grid")
    p.add_argument("--workers", type=_positive_int, metavar="N", help="local worker processes")
    p.add_argument("--scheduler", metavar="ADDRESS", help="Dask scheduler address")
    p.set_defaults(
        handler=lambda a: _dispatch("scan", "scan", a.config, a.workers, a.scheduler)
    )

    p = verbs.add_parser("check", help="validate a config and print it fully resolved, no solving")
    p.add_argument("config", metavar="CONFIG", help="YAML config file")
    p.set_defaults(handler=_check)

    p = verbs.add_parser("bench", help="performance benchmark, JSON to stdout")
    p.add_argument("--quick", action="store_true", help="smaller sizes, about a minute")
    p.set_defaults(handler=lambda a: _dispatch("bench", "bench", a.quick))
    return parser


def _check(args: argparse.Namespace) -> int:
    """Validate the config and print the resolved YAML to stdout (a scan: its points, then the config)."""
    if "scan" in load_mapping(args.config):
        from mps.pipeline.scan_run import describe

        sys.stdout.write(describe(args.config))
    else:
        sys.stdout.write(dump_config(load_config(args.config)))
    sys.stdout.flush()
    return 0


def _dispatch(verb: str, function: str, *args: Any, **kwargs: Any) -> int:
    """Call ``mps.pipeline.runner.<function>``; exit 1 with one line if this version has no such function."""
    try:
        runner = importlib.import_module("mps.pipeline.runner")
    except ModuleNotFoundError as exc:
        if exc.name != "mps.pipeline.runner":
            raise  # the runner exists but something it needs is missing: an internal failure
        runner = None
    target: Callable[..., Any] | None = getattr(runner, function, None)
    if target is None:
        _say(f"'{verb}' is not available in this version")
        return 1
    result = target(*args, **kwargs)
    return result if isinstance(result, int) and not isinstance(result, bool) else 0


def _say(message: str) -> None:
    print(f"{PROG}: {' '.join(message.split())}", file=sys.stderr)


def _renyi_list(text: str) -> list[float]:
    out = []
    for item in text.split(","):
        item = item.strip()
        try:
            n = math.inf if item.lower() == "inf" else float(item)
        except ValueError:
            n = math.nan
        if not n > 0:
            raise argparse.ArgumentTypeError(f"Renyi indices must be numbers > 0 or inf, got {item!r}")
        out.append(n)
    return out


def _cut_list(text: str) -> list[int]:
    try:
        cuts = [int(item) for item in text.split(",")]
    except ValueError:
        cuts = []
    if not cuts or min(cuts) < 1:
        raise argparse.ArgumentTypeError(f"cuts must be integers >= 1 separated by commas, got {text!r}")
    return cuts


def _positive_int(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        raise argparse.ArgumentTypeError(f"must be an integer >= 1, got {text!r}")
    return n
