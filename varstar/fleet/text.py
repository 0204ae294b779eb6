"""Terminal text of fleet results: one function per result, taking its JSON-ready dict (or the summary table).

Nothing here computes: a number printed is a number the result holds.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..text import plural

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def format_init(d: dict[str, Any]) -> str:
    """``varstar fleet init``: the archives created."""
    lines = [f"fleet {d['fleet']}: {plural(len(d['created']), 'archive')} created, listed in {Path(d['fleet_file']).name}"]
    lines += [f"  {Path(c['archive']).name:<32} {c['target']}  (from {c['source']})" for c in d["created"]]
    return "\n".join(lines)


def _failures(targets: list[dict[str, Any]]) -> list[str]:
    return [f"  FAILED {t['target']}: {t['error']}" for t in targets if t["status"] == "failed"]


def format_ingest(d: dict[str, Any]) -> str:
    """``varstar fleet ingest``: per target the nights added or why not; the files not routed."""
    ts = d["targets"]
    n_nights = sum(len(t["nights_added"]) for t in ts)
    lines = [f"fleet {d['fleet']}: {plural(len(ts), 'target')} given files, {plural(n_nights, 'night')} added, "
             f"{d['n_failed']} failed (engine: {d['engine']})"]
    for t in ts:
        if t["status"] == "failed":
            continue
        added = ", ".join(t["nights_added"]) or "no new night"
        skipped = f"; {plural(len(t['skipped']), 'file')} already stored" if t["skipped"] else ""
        lines.append(f"  {t['target']}: {added}{skipped}")
    lines += _failures(ts)
    lines += [f"  NO TARGET {Path(u['file']).name}: {u['why']}" for u in d["unmatched"]]
    lines += [f"  AMBIGUOUS {Path(a['file']).name}: fits {', '.join(a['targets'])}; {a['why']}" for a in d["ambiguous"]]
    return "\n".join(lines)


def format_update(d: dict[str, Any]) -> str:
    """``varstar fleet update``: per target the new period and timings, or why nothing was run."""
    ts = d["targets"]
    done = sum(t["status"] == "done" for t in ts)
    lines = [f"fleet {d['fleet']}: {plural(done, 'target')} updated of {len(ts)}, {d['n_failed']} failed "
             f"(engine: {d['engine']})"]
    for t in ts:
        if t["status"] == "failed":
            continue
        parts = []
        if t.get("period"):
            p = t["period"]
            err = p.get("period_err")
            parts.append(f"P = {p['period']:.7f}" + (f" ± {err:.7f} d" if err is not None else " d")
                         + f" (analysis {p['analysis']})")
        if t.get("n_new_timings"):
            parts.append(plural(int(t["n_new_timings"]), "new timing"))
        if t.get("note"):
            parts.append(t["note"])
        lines.append(f"  {t['target']}: {'; '.join(parts) or t['status']}")
    lines += _failures(ts)
    return "\n".join(lines)


def _num(v: Any, fmt: str) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return "-"
    return format(f, fmt) if math.isfinite(f) else "-"


def format_summary(table: pd.DataFrame) -> str:
    """``varstar fleet summary``: one line per target, then what needs attention."""
    head = f"{'target':<24} {'nights':>6} {'last night':<10}  {'period (d)':>11} {'dP/σ':>6} {'O-C (d)':>9} {'chk':>5}"
    lines = [head]
    for r in table.itertuples(index=False):
        lines.append(f"{str(r.target)[:24]:<24} {int(r.n_nights):>6} {r.last_night or '-':<10}  "
                     f"{_num(r.period, '.7f'):>11} {_num(r.period_change_sigma, '+.1f'):>6} "
                     f"{_num(r.o_minus_c, '+.5f'):>9} {_num(r.check_rms_ratio, '.2f'):>5}")
    attention = [(r.target, r.attention) for r in table.itertuples(index=False) if r.attention]
    lines.append("")
    lines.append(f"{plural(len(attention), 'target')} of {len(table)} need attention" if attention
                 else f"no target of {len(table)} needs attention")
    lines += [f"  {name}: {why}" for name, why in attention]
    return "\n".join(lines)


def progress_line(done: int, total: int, what: str) -> str:
    """The progress shown on a terminal while tasks run (``\\r``-rewritten)."""
    return f"\r{what}: {done}/{total} targets done"
