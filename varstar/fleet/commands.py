"""The ``varstar fleet`` command and its sub-commands (init, ingest, update, summary).

:func:`add_fleet_commands` registers them on the main parser (:func:`varstar.cli.build_parser`).
Nothing heavy is imported here: the fleet modules (and Dask) are imported when a
sub-command runs, so ``varstar --help`` stays quick.

Exit status: 0 when every target succeeded; 4 (:class:`varstar.fleet.results.FleetError`,
a :class:`varstar.errors.ReductionError`) when any target failed or an inbox file
matched no target or several, with the counts in the message and, with ``--json``,
the whole result beside ``error`` and ``exit_code``; the usual codes for a mistake
found before any work (2: input, 3: archive).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any


def _emit(args: argparse.Namespace, payload: dict[str, Any], text: str) -> None:
    """Print the result: JSON or text on stdout (the text on stderr when the CSV went to stdout)."""
    from ..export import is_stdout, to_json

    if getattr(args, "json", False):
        sys.stdout.write(to_json(payload) + "\n")
    elif getattr(args, "output", None) is not None and is_stdout(args.output):
        sys.stderr.write(text.rstrip("\n") + "\n")
    else:
        sys.stdout.write(text.rstrip("\n") + "\n")


def _progress(args: argparse.Namespace, what: str) -> Callable[[int, int, Any], None] | None:
    """A progress display on stderr, only in a terminal and never with --json."""
    if getattr(args, "json", False) or not sys.stderr.isatty():
        return None
    from .text import progress_line

    def show(done: int, total: int, outcome: Any) -> None:
        if outcome.failed:
            sys.stderr.write(f"\rfailed: {outcome.target}: {outcome.error}\n")
        sys.stderr.write(progress_line(done, total, what) + ("\n" if done == total else ""))
        sys.stderr.flush()

    return show


def _fail_if_needed(args: argparse.Namespace, d: dict[str, Any], text: str, problems: list[str]) -> None:
    """Print the result, then raise :class:`FleetError` (exit 4) when anything failed."""
    from .results import FleetError

    if not problems:
        _emit(args, d, text)
        return
    message = "; ".join(problems) + " (the others were done)"
    if not args.json:
        sys.stdout.write(text.rstrip("\n") + "\n")
    raise FleetError(message, d)


def cmd_fleet_init(args: argparse.Namespace) -> int:
    from .folder import init_fleet
    from .text import format_init

    d = init_fleet(args.fleet_dir, args.targets).to_dict()
    _emit(args, d, format_init(d))
    return 0


def cmd_fleet_ingest(args: argparse.Namespace) -> int:
    from ..text import plural
    from .runs import ingest_fleet
    from .text import format_ingest

    res = ingest_fleet(args.fleet_dir, args.inbox, workers=args.workers, scheduler=args.scheduler,
                       progress=_progress(args, "ingest"))
    d = res.to_dict()
    problems = []
    if res.n_failed:
        problems.append(f"{res.n_failed} of {plural(len(res.targets), 'target')} failed")
    if res.unmatched:
        problems.append(f"{plural(len(res.unmatched), 'file')} matched no target")
    if res.ambiguous:
        problems.append(f"{plural(len(res.ambiguous), 'file')} matched several targets")
    _fail_if_needed(args, d, format_ingest(d), problems)
    return 0


def cmd_fleet_update(args: argparse.Namespace) -> int:
    from ..text import plural
    from .runs import update_fleet
    from .text import format_update

    period, timings = (args.period, args.timings) if (args.period or args.timings) else (True, False)
    res = update_fleet(args.fleet_dir, period=period, timings=timings, workers=args.workers,
                       scheduler=args.scheduler, progress=_progress(args, "update"))
    d = res.to_dict()
    problems = [f"{res.n_failed} of {plural(len(res.targets), 'target')} failed"] if res.n_failed else []
    _fail_if_needed(args, d, format_update(d), problems)
    return 0


def cmd_fleet_summary(args: argparse.Namespace) -> int:
    from ..export import write_csv
    from .summary import fleet_summary
    from .text import format_summary

    table = fleet_summary(args.fleet_dir)
    if args.output is not None:
        write_csv(table, args.output)
    rows = [{k: (None if isinstance(v, float) and v != v else v) for k, v in r.items()}
            for r in table.to_dict(orient="records")]
    payload: dict[str, Any] = {"fleet": str(Path(args.fleet_dir)), "targets": rows,
                               "n_attention": int((table["attention"] != "").sum())}
    if args.output is not None:
        payload["csv"] = str(args.output)
    text = format_summary(table) + (f"\nwrote {args.output}" if args.output is not None else "")
    _emit(args, payload, text)
    return 0


def add_fleet_commands(sub: Any, top: argparse.ArgumentParser,
                       add: Callable[[str, Callable[[argparse.Namespace], int], str], argparse.ArgumentParser]) -> None:
    """Register ``varstar fleet`` and its sub-commands.

    Parameters
    ----------
    sub
        The main parser's sub-parsers (unused beyond ``add``; kept for symmetry with it).
    top
        The main parser (usage errors are remembered on it, for the JSON error object).
    add
        :func:`varstar.cli.build_parser`'s helper that adds a command with ``--json``.
    """
    fleet = add("fleet", _need_sub_command, "many targets at once: a folder of archives, night files routed to "
                                             "their targets and processed in parallel (Dask)")
    subs = fleet.add_subparsers(dest="fleet_command", metavar="SUB_COMMAND", parser_class=type(top),
                                help="init, ingest, update or summary")

    def add_sub(name: str, func: Callable[[argparse.Namespace], int], help_: str) -> argparse.ArgumentParser:
        sp = subs.add_parser(name, help=help_, description=help_)
        sp.top = top
        sp.set_defaults(func=func)
        sp.add_argument("--json", action="store_true", default=argparse.SUPPRESS,
                        help="print one JSON object on stdout instead of text")
        return sp

    def engine_options(sp: argparse.ArgumentParser) -> None:
        sp.add_argument("--workers", type=int, default=None, metavar="N",
                        help="worker processes of the local engine (default: the fleet file's defaults.workers, "
                             "else one per core; never more than there are targets)")
        sp.add_argument("--scheduler", default=None, metavar="ADDRESS",
                        help="a running Dask scheduler, e.g. tcp://host:8786, whose workers see the fleet folder "
                             "under the same path (default: $DASK_SCHEDULER_ADDRESS, else the fleet file's "
                             "defaults.scheduler, else a local engine started and stopped by the command)")

    sp = add_sub("init", cmd_fleet_init, "create a fleet: one archive per target description, and fleet.toml listing them")
    sp.add_argument("fleet_dir", type=Path, metavar="FLEET_DIR",
                    help="the fleet folder (created if missing; an existing fleet gets the new targets added)")
    sp.add_argument("targets", type=Path, nargs="+", metavar="TARGETS",
                    help="target descriptions (TOML), one per target; each archive is named after its target")

    sp = add_sub("ingest", cmd_fleet_ingest,
                 "route night files to their targets' archives and ingest them, one parallel task per archive")
    sp.add_argument("fleet_dir", type=Path, metavar="FLEET_DIR", help="the fleet folder")
    sp.add_argument("inbox", type=Path, nargs="+", metavar="INBOX",
                    help="night files (measurement tables, FITS frames) or folders of them; a file belongs to the "
                         "archive whose name it starts with, else to the one target whose stars it measures")
    engine_options(sp)

    sp = add_sub("update", cmd_fleet_update,
                 "analyse again the targets with new nights: period and/or timings, one parallel task per archive")
    sp.add_argument("fleet_dir", type=Path, metavar="FLEET_DIR", help="the fleet folder")
    sp.add_argument("--period", action="store_true",
                    help="run the period analysis (default: the period alone when neither --period nor --timings is given)")
    sp.add_argument("--timings", action="store_true",
                    help="time the extrema of targets with an ephemeris (default: not run unless given)")
    engine_options(sp)

    sp = add_sub("summary", cmd_fleet_summary,
                 "one line per target: nights, period and its change, O − C, check stars, what needs attention")
    sp.add_argument("fleet_dir", type=Path, metavar="FLEET_DIR", help="the fleet folder")
    sp.add_argument("-o", "--output", type=Path, default=None, metavar="FILE",
                    help="also write the table as CSV (e.g. fleet.csv; '-' for standard output; default: no file)")


def _need_sub_command(args: argparse.Namespace) -> int:
    from ..errors import InputError

    raise InputError("varstar fleet: name a sub-command: init, ingest, update or summary (see varstar fleet --help)")
