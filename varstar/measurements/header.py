"""The header line of a measurement table: column names, the column mapping, long or wide form.

The header is checked from the first line alone, before any row is read, so
that a wrong header (say 100,000 unknown columns) costs the same whatever lies
below it.  The result, :class:`Header`, gives varstar's name of every column in
the file's order and tells the long form from the wide form.
"""

from __future__ import annotations

import csv
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from .messages import fail, listing, shown_cell

#: Columns the long form must have.
REQUIRED_LONG = ("jd", "band", "star", "mag", "mag_err")
#: Columns either form may have.
OPTIONAL = ("airmass", "exptime", "flag", "frame")
#: Columns that describe an exposure (in the wide form, every other column is a star's).
PER_EXPOSURE = ("jd", "band") + OPTIONAL


@dataclass(frozen=True)
class Header:
    """The checked header line: varstar's name of every column, in the file's order."""

    line: int
    names: tuple[str, ...]
    long: bool

    @property
    def placeholder(self) -> str:
        """A header line of plain names put before each piece for pandas (the real one is checked already)."""
        return ",".join(f"c{k}" for k in range(len(self.names)))


def _header_fields(text: str, line: int, source: str) -> list[str]:
    """The column names of the header line, stripped; a byte-order mark before it is skipped."""
    text = text.strip("\r").removeprefix("\ufeff")  # as pandas skips a byte-order mark that starts what it reads
    if "\r" in text:
        raise fail(source, line, "carriage return inside the line (one table row per line; save the file with ordinary line ends)")
    if '"' in text:
        try:
            fields = next(csv.reader([text], skipinitialspace=True, strict=True))
        except csv.Error:
            raise fail(source, line, "unbalanced double quote (a quoted cell must end on the same line)") from None
    else:
        fields = text.split(",")
    return [f.strip() for f in fields]


def _mapped_names(header: list[str], seen: set[str], line: int, source: str, columns: Mapping[str, str] | None) -> list[str]:
    """varstar's names of the header's columns once ``columns`` (varstar's name -> the file's) is applied."""
    if not columns:
        return header
    missing = [theirs for theirs in columns.values() if theirs not in seen]
    if missing:
        raise fail(source, line, f"mapped column '{missing[0]}' is not in the header ({listing(header)})")
    ours = {theirs: mine for mine, theirs in columns.items()}
    names = [ours.get(h, h) for h in header]
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise fail(source, line, f"column '{dup}' appears twice in the header once the column mapping is applied")
    return names


def _check_wide(names: list[str], line: int, source: str, ids: Sequence[str], id_set: set[str]) -> None:
    """A wide-form header: 'jd', 'band', and a magnitude and an error column for each star given."""
    present = set(names)
    for c in ("jd", "band"):
        if c not in present:
            raise fail(source, line, f"missing column '{c}' (a table needs either a 'star' column (long form) or 'jd', 'band' and one column per star (wide form))")
    star_cols = [c for c in names if c not in PER_EXPOSURE]
    stars = {c for c in star_cols if not c.endswith("_err")}
    for c in star_cols:
        sid = c[:-4] if c.endswith("_err") else c
        if sid not in id_set:
            raise fail(source, line, f"column {shown_cell(c)} is neither a known column nor a star of the target ({listing(list(ids))})")
        if c.endswith("_err") and sid not in stars:
            raise fail(source, line, f"column '{c}' has no magnitude column '{sid}'")
    no_err = [s for s in names if s in stars and f"{s}_err" not in present]
    if no_err:
        raise fail(source, line, f"star column '{no_err[0]}' has no error column '{no_err[0]}_err'")
    if not stars:
        raise fail(source, line, "no star columns found")


def plan_header(text: str, line: int, source: str, columns: Mapping[str, str] | None, ids: Sequence[str], id_set: set[str]) -> Header:
    """Check the header before any row is read: names, mapping, form, star columns.

    Reading only the first line keeps the cost of a wrong header (say 100,000
    unknown columns) independent of the rows below it.

    Parameters
    ----------
    text
        The header line, without its line end.
    line
        Its 1-based line number.
    source
        The file's name, for messages.
    columns
        Optional mapping from varstar's column name to the file's.
    ids, id_set
        The target's star ids, as a sequence (for messages) and as a set.

    Returns
    -------
    Header
        varstar's name of every column and the form.

    Raises
    ------
    InputError
        Naming ``source``, the line and the first column at fault.
    """
    header = _header_fields(text, line, source)
    seen: set[str] = set()
    for k, h in enumerate(header):
        if h == "":
            raise fail(source, line, f"column {k + 1} of the header has no name (every column needs one)")
        if h in seen:
            raise fail(source, line, f"column '{h}' appears twice in the header")
        seen.add(h)
    names = _mapped_names(header, seen, line, source, columns)
    present = set(names)
    if "star" in present:
        missing = [c for c in REQUIRED_LONG if c not in present]
        if missing:
            raise fail(source, line, f"missing column(s) {', '.join(missing)} (long form needs {', '.join(REQUIRED_LONG)})")
        unknown = [c for c in names if c not in REQUIRED_LONG + OPTIONAL]
        if unknown:
            more = f" and {len(unknown) - 1} more" if len(unknown) > 1 else ""
            raise fail(source, line, f"unknown column {shown_cell(unknown[0])}{more} (known: {', '.join(REQUIRED_LONG + OPTIONAL)}; use a column mapping to rename)")
        return Header(line, tuple(names), True)
    _check_wide(names, line, source, ids, id_set)
    return Header(line, tuple(names), False)
