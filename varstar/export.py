"""Neutral CSV and JSON output, and the one writer of every result file.

CSV: one observation a row, plain column names (``bjd_tdb, mag, mag_err, ...``),
dot decimal, no index column.  Text cells that a spreadsheet would read as a
formula (starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return) are
prefixed with a single quote; numbers are written as numbers.

JSON: strict (NaN and infinity become ``null``), numpy types turned into Python
ones, so any JSON parser reads it.

Files: :func:`write_atomic` writes every result (CSV, JSON, plots, setups):
a regular file is replaced atomically (through symbolic links, which stay
links), a FIFO or a device is written through, ``-`` is standard output, and
a folder or a missing folder is refused in words.
"""

from __future__ import annotations

import errno
import io
import json
import os
import secrets
import stat
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .results import plain

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

#: Columns of the exported light curve, in order.
LIGHTCURVE_COLUMNS = (
    "bjd_tdb", "hjd_utc", "jd_utc", "band", "star", "mag", "mag_err", "cal_err", "transformed", "bv", "bv_err",
    "mag_untransformed", "mag_untransformed_err", "epsilon_v", "mu_bv", "k2_bv", "airmass", "night", "frame",
    "quality", "flags",
)


def to_json(obj: Any, *, indent: int | None = None) -> str:
    """Strict JSON text of ``obj`` (see :func:`plain`)."""
    return json.dumps(plain(obj), indent=indent, allow_nan=False, ensure_ascii=False)


def _defuse(value: Any) -> Any:
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def safe_text_columns(df: pd.DataFrame) -> pd.DataFrame:
    """Copy of ``df`` whose text cells cannot start a spreadsheet formula."""
    out = df.copy()
    for col in out.columns:
        if out[col].dtype == object or pd.api.types.is_string_dtype(out[col]):
            out[col] = out[col].map(_defuse)
    return out


def write_csv(df: pd.DataFrame, path: str | Path) -> Path:
    """Write ``df`` as neutral CSV, atomically (a partial file never appears at ``path``).

    With ``\n`` line ends the csv writer leaves a carriage return inside a cell
    unquoted, and a spreadsheet starts a new row there (whose first cell could be
    a formula); so when a text cell holds one, every text cell is quoted.
    Boolean columns are written 1 and 0.
    """
    import csv

    # One spelling of true and false in every CSV varstar writes: 1 and 0 (any reader takes them as numbers).
    bools = [c for c in df.columns if pd.api.types.is_bool_dtype(df[c])]
    if bools:
        df = df.astype({c: "int8" for c in bools})
    safe = safe_text_columns(df)
    text_cols = [c for c in safe.columns if safe[c].dtype == object or pd.api.types.is_string_dtype(safe[c])]
    has_cr = any(safe[c].astype(str).str.contains("\r", regex=False).any() for c in text_cols)
    text = safe.to_csv(
        index=False, float_format="%.10g", lineterminator="\n",
        quoting=csv.QUOTE_NONNUMERIC if has_cr else csv.QUOTE_MINIMAL,
    )
    return write_atomic(path, text.encode("utf-8"))


#: The output name that means standard output (common practice for command-line tools).
STDOUT = "-"


def _stdout_identity() -> tuple[int, int] | None:
    """(device, inode) of the file or pipe ``sys.stdout`` writes to, when it is a regular file or a pipe.

    A terminal or ``/dev/null`` gives ``None``: writing through such a device by
    another name is harmless, and only files and pipes need the text to go elsewhere.
    """
    try:
        st = os.fstat(sys.stdout.fileno())
    except (AttributeError, OSError, ValueError, io.UnsupportedOperation):
        return None
    if stat.S_ISREG(st.st_mode) or stat.S_ISFIFO(st.st_mode):
        return (st.st_dev, st.st_ino)
    return None


def is_stdout(path: str | os.PathLike[str]) -> bool:
    """Whether ``path`` means standard output: ``-``, or another name of the file or pipe stdout goes to.

    ``/dev/stdout`` (or ``/dev/fd/1``) with stdout redirected into a file or a
    pipe is written through ``sys.stdout``, so its bytes and anything else
    printed keep their order and a shell's ``>>`` keeps appending.
    """
    if str(path) == STDOUT:
        return True
    ident = _stdout_identity()
    if ident is None:
        return False
    try:
        st = os.stat(path)
    except (OSError, ValueError):
        return False
    return (st.st_dev, st.st_ino) == ident


def _explain_missing_parent(path: Path, parent: Path) -> str:
    """Why ``parent`` cannot hold a new file: the nearest ancestor that is missing or is not a folder."""
    probe = parent
    while True:
        try:
            st = os.stat(probe)
        except FileNotFoundError:
            up = probe.parent
            if up == probe:
                break
            if os.path.isdir(up):
                return f"{path}: folder {probe} does not exist; create it first or choose another place"
            probe = up
            continue
        except OSError as exc:
            return f"{path}: cannot reach folder {probe} ({exc.strerror})"
        if not stat.S_ISDIR(st.st_mode):
            return f"{path}: {probe} is a file, not a folder"
        break
    return f"{path}: folder {parent} does not exist; create it first or choose another place"


def _named(path: Path, real: Path) -> str:
    """``path`` for a message, with the file it leads to when it is a symbolic link."""
    return f"{path} (a link to {real})" if os.path.islink(path) else str(path)


_KIND_WORDS = {stat.S_IFSOCK: "a socket", stat.S_IFBLK: "a block device (a disk)", stat.S_IFDIR: "a folder"}


def _classify(path: Path, *, regular: bool = False) -> tuple[str, Path, os.stat_result | None]:
    """What writing to ``path`` means: ``("stdout"|"stream"|"file"|"new", real path, stat of what is there)``.

    ``stream`` is a FIFO or a character device (written through, never
    replaced); ``file`` an existing regular file and ``new`` a name not yet
    taken, both given as the real path behind any symbolic links, so the
    replacement happens there and a link stays a link.  With ``regular`` only
    a regular file (existing or new) is accepted, for files that are read and
    updated.  Raises :class:`OutputError` for everything else, naming ``path``.
    """
    from .errors import OutputError

    what = "a file that is read and updated (a setups file)" if regular else None
    if is_stdout(path):
        if regular:
            raise OutputError(f"{path}: is standard output; {what} must be a regular file")
        return "stdout", path, None
    try:
        st = os.stat(path)  # follows symbolic links
    except (FileNotFoundError, NotADirectoryError):
        st = None
    except OSError as exc:  # a loop of links, no permission to look, a name too long
        raise OutputError(f"{path}: cannot write there ({exc.strerror})") from None
    except ValueError:  # a NUL in the name
        raise OutputError(f"{path!r}: not a usable file name") from None
    if st is not None:
        fmt = stat.S_IFMT(st.st_mode)
        if fmt == stat.S_IFDIR:
            raise OutputError(f"{path}: is a folder; give a file name (inside it, or anywhere else)")
        if fmt in (stat.S_IFIFO, stat.S_IFCHR):
            if regular:
                kind = "a FIFO" if fmt == stat.S_IFIFO else "a device"
                raise OutputError(f"{path}: is {kind}; {what} must be a regular file")
            return "stream", path, st
        if fmt != stat.S_IFREG:
            raise OutputError(f"{path}: is {_KIND_WORDS.get(fmt, 'not a regular file')}; give a regular file, a FIFO or -")
        real = Path(os.path.realpath(path))
        try:
            st_real = os.stat(real)
        except OSError:
            st_real = None
        if st_real is None or (st_real.st_dev, st_real.st_ino) != (st.st_dev, st.st_ino):
            # e.g. /proc/self/fd/N of a deleted file: no name to put a new version under.
            raise OutputError(f"{path}: leads to a file that has no name of its own to replace; give a plain file name")
        if not os.access(real, os.W_OK):  # a read-only file says "do not overwrite", as it does to the shell's >
            raise OutputError(f"{_named(path, real)}: is read-only; make it writable or choose another name")
        return "file", real, st
    real = Path(os.path.realpath(path))
    parent = real.parent
    try:
        parent_ok = stat.S_ISDIR(os.stat(parent).st_mode)
    except OSError:
        parent_ok = False
    if not parent_ok:
        if os.path.islink(path):
            raise OutputError(_explain_missing_parent(path, parent) + f" ({path} is a link to {real})")
        raise OutputError(_explain_missing_parent(path, path.parent))
    return "new", real, None


def check_output_path(path: str | os.PathLike[str], *, regular: bool = False) -> None:
    """Refuse, before any work, an output name that cannot be written.

    Parameters
    ----------
    path
        The output as the user gave it (``-`` is standard output).
    regular
        Only a regular file will do (a file that is read, then updated).

    Raises
    ------
    OutputError
        ``path`` is a folder, a socket or a block device, its folder does not
        exist, or (with ``regular``) it is a FIFO, a device or stdout.
    """
    _classify(Path(path), regular=regular)


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        n = os.write(fd, view)
        view = view[n:]


def _replace_atomically(real: Path, data: bytes, old: os.stat_result | None) -> None:
    """Write ``data`` into a new file beside ``real`` and rename it over ``real`` (same folder, same file system).

    The new file keeps the permission bits of the file it replaces; a new file
    gets the usual ones (0o666 less the umask).
    """
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0)
    stem = real.name[:40]
    for _attempt in range(100):
        tmp = real.with_name(f".{stem}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
        try:
            fd = os.open(tmp, flags, 0o666)
            break
        except FileExistsError:
            continue
    else:  # pragma: no cover - 100 collisions of 32 random bits
        raise FileExistsError(errno.EEXIST, os.strerror(errno.EEXIST), str(tmp))
    try:
        try:
            _write_all(fd, data)
            if old is not None:
                os.fchmod(fd, stat.S_IMODE(old.st_mode))
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, real)
    finally:
        if os.path.lexists(tmp):
            os.unlink(tmp)


def _write_stream(path: Path, data: bytes) -> None:
    """Write through to a FIFO or a character device, opened by its name (no truncation, no creation)."""
    from .errors import OutputError

    fd = os.open(path, os.O_WRONLY | getattr(os, "O_NOCTTY", 0) | getattr(os, "O_CLOEXEC", 0))
    try:
        mode = os.fstat(fd).st_mode
        if not (stat.S_ISFIFO(mode) or stat.S_ISCHR(mode)):  # replaced by something else since we looked
            raise OutputError(f"{path}: changed while being opened; nothing written")
        try:
            _write_all(fd, data)
        except BrokenPipeError:
            raise OutputError(f"{path}: the reader closed it before all {len(data)} bytes were written") from None
    finally:
        os.close(fd)


def _write_stdout(data: bytes) -> None:
    """Write ``data`` to standard output after anything already printed (a broken pipe is left to the caller)."""
    from .errors import OutputError

    out = sys.stdout
    buf = getattr(out, "buffer", None)
    out.flush()
    if buf is not None:
        buf.write(data)
        buf.flush()
        return
    try:
        fd = out.fileno()
    except (AttributeError, OSError, ValueError, io.UnsupportedOperation):
        raise OutputError("-: standard output does not take binary data here; give a file name") from None
    _write_all(fd, data)


def write_atomic(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path``; the one writer of every result file.

    What ``path`` names decides how:

    - a regular file, new or old: a temporary file beside it, flushed to disk
      and renamed over it, so a partial file never appears (the replaced
      file's permission bits are kept; as with any atomic replacement, other
      hard links keep the old content);
    - a symbolic link: followed to its final target, which is replaced as
      above (the link stays a link; a dangling link's target is created);
    - a FIFO or a character device (``/dev/null``, a terminal): written
      through, never replaced by a regular file;
    - ``-``, or another name of the file or pipe stdout goes to
      (``/dev/stdout``): written to ``sys.stdout``.

    A folder, a socket, a block device or a name whose folder does not exist
    is refused with :class:`OutputError`, as is any failure to write, and
    nothing is left behind.

    Parameters
    ----------
    path
        Where to write, as the user gave it.
    data
        The complete content.

    Returns
    -------
    Path
        ``path`` (as given).
    """
    from .errors import OutputError

    path = Path(path)
    kind, real, st = _classify(path)
    try:
        if kind == "stdout":
            _write_stdout(data)
        elif kind == "stream":
            _write_stream(path, data)
        else:
            _replace_atomically(real, data, st)
    except OSError as exc:
        if isinstance(exc, BrokenPipeError) and kind == "stdout":
            raise
        where = _named(path, real) if kind in ("file", "new") else str(path)
        raise OutputError(f"{where}: cannot write ({exc.strerror or exc})") from None
    return path


def lightcurve_table(lc: pd.DataFrame) -> pd.DataFrame:
    """The export form of a light curve: fixed column order, times to 1e-8 d."""
    out = lc.loc[:, list(LIGHTCURVE_COLUMNS)].copy()
    for c in ("bjd_tdb", "hjd_utc", "jd_utc"):
        out[c] = out[c].map(lambda v: f"{v:.8f}" if np.isfinite(v) else "")
    return out


# Windows device names, with or without an extension (Microsoft, "Naming Files, Paths, and Namespaces";
# COM0/LPT0 and the superscript digits, which NFKD turns into 1-3, are listed there too; from memory).
_RESERVED = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(10)), *(f"LPT{i}" for i in range(10))}


def safe_filename(text: str, default: str = "target") -> str:
    """A file-name stem derived from free text (e.g. a target name).

    Keeps letters, digits, ``-``, ``_`` and ``.``; everything else (path
    separators, control characters, spaces) becomes ``_`` and runs of dots
    become one.  Never returns ``.``/``..``-style names, names containing
    ``..``, hidden names or reserved device names.
    """
    import re
    import unicodedata

    norm = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode("ascii")
    stem = re.sub(r"\.{2,}", ".", re.sub(r"[^A-Za-z0-9._-]+", "_", norm)).strip("._-")[:80].strip("._-")
    if not stem or stem.split(".")[0].upper() in _RESERVED:
        stem = f"{default}_{stem}" if stem else default
    return stem


#: Columns of the timings CSV, in order.
TIMINGS_COLUMNS = ("bjd_tdb", "err", "method", "band", "type", "cycle", "o_minus_c", "o_minus_c_min", "check_method",
                   "check_bjd_tdb", "check_err", "disagree", "in_fit", "night", "n_points", "note")


def timings_table(timings: list[dict[str, Any]]) -> pd.DataFrame:
    """Timings (as returned by :func:`varstar.analyses.timings_of_archive`) as a neutral table, one a row.

    Times are BJD_TDB, errors and O − C in days (``o_minus_c_min`` in minutes, as
    the O − C figure); ``disagree`` is 1 where the two estimates differ by more
    than their errors allow (beyond the usual difference between the methods).
    """
    df = pd.DataFrame(list(timings), columns=[*TIMINGS_COLUMNS, "new"])[list(TIMINGS_COLUMNS)]
    df["o_minus_c_min"] = df["o_minus_c"] * 1440.0
    df["in_fit"] = df["in_fit"].fillna(False).astype(bool)
    df["disagree"] = df["disagree"].astype(bool)  # written 1 / 0, as every boolean (write_csv)
    for c in ("bjd_tdb", "check_bjd_tdb"):  # full Julian Dates: fixed decimals (1e-6 d = 0.09 s), not 10 digits
        df[c] = df[c].map(lambda v: f"{v:.6f}" if v is not None and np.isfinite(v) else "")
    return df
