"""Regenerate the invented demo series shipped in this folder.

Usage::

    python demo_series/make_demo.py [OUTDIR]

Writes ``target.toml``, one measurement table per night (``night-YYYY-MM-DD.csv``,
long form; one night as ``night-YYYY-MM-DD-wide.csv``, wide form), ``truth.csv``
and ``truth.json``, and the invented standard field (``standards.toml``,
``standards.csv``) into OUTDIR (default: this folder).  The scenario and its seed
are fixed in :func:`varstar.simulate.demo_scenario`, so the files come out byte
for byte the same every time.  The field and its stars are invented.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent

try:
    from varstar.simulate import demo_files
except ModuleNotFoundError:  # run from a source checkout without installing
    sys.path.insert(0, str(HERE.parent))
    from varstar.simulate import demo_files


def main(argv: list[str]) -> int:
    if len(argv) > 1 or (argv and argv[0] in ("-h", "--help")):
        sys.stderr.write("usage: python demo_series/make_demo.py [OUTDIR]\n")
        return 0 if argv and argv[0] in ("-h", "--help") else 2
    outdir = Path(argv[0]) if argv else HERE
    outdir.mkdir(parents=True, exist_ok=True)
    for name, text in demo_files().items():
        (outdir / name).write_bytes(text.encode("utf-8"))
        sys.stdout.write(f"{outdir / name}\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
