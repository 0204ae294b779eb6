"""The header line of a measurement table: column names, the column mapping, long or wide form.

The header is checked from the first line alone, before any row is read, so
that a wrong header (say 100,000 unknown columns) costs the same whatever lies
below it.  The result, :class:`Header`, gives varstar's name of every column in
the file's order, the delimiter and tells the long form from the wide form.

Forgiving where the meaning is clear: varstar's column names are matched
without regard to case (``JD``, ``Mag_Err``); a header line with no comma but
with semicolons or tabs sets that delimiter for the whole file (spreadsheets
in many locales save with ``;``; common practice).  A column still missing is
named, with a header cell that looks like it (spelled with spaces or another
case) offered as a column mapping.  Star ids are matched exactly.
"""

from __future__ import annotations

import csv
import re
import shlex
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from .messages import fail, listing, shown_cell

#: Columns the long form must have.
REQUIRED_LONG = ("jd", "band", "star", "mag", "mag_err")
#: Columns either form may have.
OPTIONAL = ("airmass", "exptime", "flag", "frame")
#: Columns that describe an exposure (in the wide form, every other column is a star's).
PER_EXPOSURE = ("jd", "band") + OPTIONAL
#: Every name varstar knows; a header cell equal to one of them but for case is read as it.
KNOWN = REQUIRED_LONG + OPTIONAL
#: Columns the long form may carry to explain a measurement (what ``varstar measure`` writes beside
#: it: why it is flagged, the frame's FWHM, the sky, the peak, the position); read past, not stored.
DIAGNOSTIC = ("flag_reason", "fwhm_px", "sky", "peak", "x", "y")
#: Delimiters a header line may use instead of the comma, and how messages name them.
DELIMITER_NAMES = {",": "commas", ";": "semicolons", "\t": "tabs"}


@dataclass(frozen=True)
class Header:
    """The checked header line: varstar's name of every column, in the file's order."""

    line: int
    names: tuple[str, ...]
    long: bool
    sep: str = ","

    @property
    def placeholder(self) -> str:
        """A header line of plain names put before each piece for pandas (the real one is checked already)."""
        return self.sep.join(f"c{k}" for k in range(len(self.names)))


def delimiter_of(text: str) -> str:
    """The delimiter of a table from its header line: a comma, unless the line has none but has semicolons or tabs.

    Where a line has both semicolons and tabs (and no comma), the more frequent wins.
    """
    if "," in text:
        return ","
    n_semi, n_tab = text.count(";"), text.count("\t")
    if n_semi == 0 and n_tab == 0:
        return ","
    return ";" if n_semi >= n_tab else "\t"


def _header_fields(text: str, line: int, source: str, sep: str = ",") -> list[str]:
    """The column names of the header line, stripped; a byte-order mark before it is skipped."""
    text = text.strip("\r").removeprefix("\ufeff")  # as pandas skips a byte-order mark that starts what it reads
    if "\r" in text:
        raise fail(source, line, "carriage return inside the line (one table row per line; save the file with ordinary line ends)")
    if '"' in text:
        try:
            fields = next(csv.reader([text], delimiter=sep, skipinitialspace=True, strict=True))
        except csv.Error:
            raise fail(source, line, "unbalanced double quote (a quoted cell must end on the same line)") from None
    else:
        fields = text.split(sep)
    return [f.strip() for f in fields]


def _folded(header: list[str], line: int, source: str, id_set: set[str]) -> list[str]:
    """The header with cells equal to a known column name but for case given that name (star ids stay as written)."""
    names = []
    for h in header:
        low = h.lower()
        if h in KNOWN or low not in KNOWN + DIAGNOSTIC or h in id_set or (h.endswith("_err") and h[:-4] in id_set):
            names.append(h)
        else:
            names.append(low)
    first: dict[str, str] = {}
    for h, n in zip(header, names):  # one pass: a header may have 100,000 cells
        if n in first:
            raise fail(source, line, f"columns {shown_cell(first[n])} and {shown_cell(h)} are both '{n}' "
                                     f"(column names are matched without regard to case); keep one")
        first[n] = h
    return names


def _squeezed(name: str) -> str:
    """A name without case, blanks, underscores, hyphens or dots: how a near spelling is recognised."""
    return re.sub(r"[\s_\-.]+", "", name.lower())


def mapping_hint(want: str, header: Sequence[str], used: set[str]) -> str:
    """A suggestion to map a header cell spelled like ``want`` (see :func:`_squeezed`), or nothing."""
    near = [h for h in header if h not in used and _squeezed(h) == _squeezed(want)]
    if not near:
        return ""
    h = near[0]
    return (f"; the header's {shown_cell(h)} looks like '{want}': map it with "
            f"--column {shlex.quote(f'{want}={h}')} (in Python, columns={{{want!r}: {h!r}}})")


def _mapped_names(header: list[str], seen: set[str], line: int, source: str, columns: Mapping[str, str] | None) -> list[str]:
    """varstar's names of the header's columns once ``columns`` (varstar's name -> the file's) is applied."""
    if not columns:
        return header
    missing = [theirs for theirs in columns.values() if theirs not in seen]
    if missing:
        near = [h for h in header if _squeezed(h) == _squeezed(missing[0])]
        hint = f"; did you mean {shown_cell(near[0])}? (the mapping names the file's column exactly)" if near else ""
        raise fail(source, line, f"mapped column '{missing[0]}' is not in the header ({listing(header)}){hint}")
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
            if c in REQUIRED_LONG:  # 'star', 'mag' or 'mag_err' beside star columns: the two forms mixed
                raise fail(source, line, f"column '{c}' belongs to the long form (one row per star, with a 'star' column), "
                                         f"but the header also has star columns of the wide form; use one form")
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
    sep = delimiter_of(text)
    header = _header_fields(text, line, source, sep)
    seen: set[str] = set()
    for k, h in enumerate(header):
        if h == "":
            raise fail(source, line, f"column {k + 1} of the header has no name (every column needs one)")
        if h in seen:
            raise fail(source, line, f"column '{h}' appears twice in the header")
        seen.add(h)
    names = _folded(_mapped_names(header, seen, line, source, columns), line, source, id_set)
    present = set(names)
    if _is_long(names, id_set):
        missing = [c for c in REQUIRED_LONG if c not in present]
        if missing:
            # The file's cells that are not read as one of varstar's names may be a near spelling.
            used = {h for h, n in zip(header, names) if n in KNOWN}
            which = f"column '{missing[0]}'" if len(missing) == 1 else "columns " + ", ".join(f"'{c}'" for c in missing)
            raise fail(source, line, f"missing {which} (a long table needs {', '.join(REQUIRED_LONG)}; "
                                     f"a wide table has a column per star instead of 'star', 'mag' and 'mag_err')"
                                     f"{''.join(mapping_hint(c, header, used) for c in missing)}")
        unknown = [c for c in names if c not in KNOWN + DIAGNOSTIC]
        if unknown:
            more = f" and {len(unknown) - 1} more" if len(unknown) > 1 else ""
            raise fail(source, line, f"unknown column {shown_cell(unknown[0])}{more} (known: {', '.join(KNOWN)}; read "
                                     f"past: {', '.join(DIAGNOSTIC)}; use a column mapping to rename)")
        return Header(line, tuple(names), True, sep)
    _check_wide(names, line, source, ids, id_set)
    return Header(line, tuple(names), False, sep)


def _is_long(names: list[str], id_set: set[str]) -> bool:
    """The long form: a 'star' column; or, with no column named after a star of the target, 'mag' or 'mag_err'.

    A header with a star's column is read as the wide form; one with neither a
    star's column nor any long-form column is too (its messages then name the
    columns that are neither).
    """
    if "star" in names:
        return True
    if any(n in id_set or (n.endswith("_err") and n[:-4] in id_set) for n in names):
        return False
    return "mag" in names or "mag_err" in names
