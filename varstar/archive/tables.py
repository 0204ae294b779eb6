"""Column-store tables inside an HDF5 group (see :mod:`.layout`)."""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import h5py
import numpy as np

from ..errors import ArchiveError
from .layout import CODES, STR, TABLES, code_capacity

# Rows per chunk of a numeric column.  An append rewrites the last (partial) chunk of
# every column, so smaller chunks make each change cheaper; 16,384 rows (128 KiB of
# float64) halved the per-night write time against 65,536 in the 10-year benchmark.
_CHUNK_ROWS = 16_384


def _dtype(code: str):
    return h5py.string_dtype("utf-8") if code == STR else np.dtype(code)


def _fixed_text(code: str) -> bool:
    return code.startswith("S")


def _encode_fixed(vals, code: str) -> np.ndarray:
    """Fixed-length ASCII column values; refuses what does not fit rather than cutting it."""
    n = int(code[1:])
    out = [str(v).encode("ascii") for v in vals]
    if any(len(b) > n for b in out):
        raise ValueError(f"text longer than {n} bytes for a {code} column")
    return np.array(out, dtype=code)


def _as_numbers(vals, code: str, table: str, col: str) -> np.ndarray:
    """Column values as ``code``, refusing integers the type cannot hold.

    ``numpy`` converts out-of-range integers by wrapping them (257 becomes 1 as
    ``uint8``), which would file a row under another band, star or night without a
    word: such a value is refused instead, naming the column.
    """
    arr = np.asarray(vals)
    dt = np.dtype(code)
    if dt.kind in "iu" and arr.size:
        info = np.iinfo(dt)
        if arr.dtype.kind == "f":
            bad = ~np.isfinite(arr) | (arr < info.min) | (arr > info.max)
        elif arr.dtype.kind in "iub":
            bad = (arr < info.min) | (arr > info.max) if arr.dtype.kind != "b" else np.zeros(arr.shape, bool)
        else:  # objects (Python ints of any size): compare one by one, exactly
            bad = np.array([not (info.min <= int(v) <= info.max) for v in arr.ravel()]).reshape(arr.shape)
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            raise ArchiveError(
                f"/{table}/{col}: value {arr.ravel()[k]!r} does not fit the column's type ({dt.name}: {info.min} to "
                f"{info.max}); {int(bad.sum())} value(s) refused, nothing was written"
            )
    return arr.astype(dt, copy=False)


def create_tables(root: h5py.Group, only: Iterable[str] | None = None) -> None:
    """Create every table of the layout (or those in ``only``), empty."""
    for name, cols in TABLES.items():
        if only is not None and name not in only:
            continue
        g = root.create_group(name)
        for col, code in cols.items():
            create_column(g, col, code)


def create_column(g: h5py.Group, col: str, code: str) -> h5py.Dataset:
    """One empty, appendable column of a table group."""
    kw = {}
    if code != STR:
        # gzip level 1 with byte shuffling: nearly the size of level 4 on these
        # columns and twice as fast to read back (measured on a year of nights)
        kw = {"compression": "gzip", "compression_opts": 1, "shuffle": True}
    return g.create_dataset(col, shape=(0,), maxshape=(None,), dtype=_dtype(code),
                            chunks=(_CHUNK_ROWS if code != STR else 1024,), **kw)


def retype_column(root: h5py.Group, table: str, col: str) -> None:
    """Rewrite a column of an older archive with the type the layout now gives it (same values)."""
    code = TABLES[table][col]
    old = root[table][col]
    values = old.asstr()[()] if h5py.check_string_dtype(old.dtype) is not None else old[()]
    del root[table][col]
    ds = create_column(root[table], col, code)
    if len(values):
        ds.resize((len(values),))
        ds[:] = _encode_fixed(values, code) if _fixed_text(code) else np.asarray(values).astype(code)


def n_rows(root: h5py.Group, table: str) -> int:
    first = next(iter(TABLES[table]))
    return int(root[table][first].shape[0])


def append(root: h5py.Group, table: str, columns: Mapping[str, np.ndarray | list]) -> int:
    """Append rows to ``table``; return the index of the first new row.

    ``columns`` must give every column of the table, all of one length.
    """
    spec = TABLES[table]
    if set(columns) != set(spec):
        missing = set(spec) - set(columns)
        extra = set(columns) - set(spec)
        raise ValueError(f"table {table}: missing columns {sorted(missing)}, unexpected {sorted(extra)}")
    lengths = {len(v) for v in columns.values()}
    if len(lengths) != 1:
        raise ValueError(f"table {table}: columns of different lengths {lengths}")
    n_new = lengths.pop()
    start = n_rows(root, table)
    if n_new == 0:
        return start
    arrays = {}  # every column converted (and checked) before any is written: no half-written row
    for col, code in spec.items():
        vals = columns[col]
        if code == STR:
            arrays[col] = np.array([str(v) for v in vals], dtype=object)
        elif _fixed_text(code):
            arrays[col] = _encode_fixed(vals, code)
        else:
            arrays[col] = _as_numbers(vals, code, table, col)
    for col, arr in arrays.items():
        ds = root[table][col]
        ds.resize((start + n_new,))
        ds[start:] = arr
    return start


def read(root: h5py.Group, table: str, columns: Iterable[str] | None = None, start: int = 0) -> dict[str, np.ndarray]:
    """Read columns of ``table`` from row ``start`` on (text columns come back as ``str`` objects)."""
    spec = TABLES[table]
    out: dict[str, np.ndarray] = {}
    g = root[table]
    for col in columns or spec:
        ds = g[col]
        code = spec[col]
        if code == STR:
            out[col] = ds.asstr()[start:]
        elif _fixed_text(code):
            out[col] = ds[start:].astype(str)  # numpy str array: compares equal to Python str
        else:
            out[col] = ds[start:]
    return out


def code_of(root: h5py.Group, table: str, column: str, value: str, *, add: bool) -> int:
    """Index of ``value`` in a small lookup column, optionally appending it.

    A new name is refused when its code would not fit the columns that hold these
    codes (:func:`.layout.code_capacity`): 256 bands, 65,536 stars.
    """
    values = list(root[table][column].asstr()[()])
    if value in values:
        return values.index(value)
    if not add:
        raise KeyError(value)
    for code_col, (lookup, name_col) in CODES.items():
        if (lookup, name_col) == (table, column) and len(values) >= code_capacity(code_col):
            raise ArchiveError(
                f"{root.file.filename}: cannot add {code_col} {value!r}: the archive already holds "
                f"{len(values):,} {lookup}, the most its {code_col} codes can tell apart ({code_capacity(code_col):,}); "
                f"nothing was written. Keep {lookup} of different projects in different archives."
            )
    row = {c: [""] for c in TABLES[table]}
    row[column] = [value]
    return append(root, table, row)


def has_table(root: h5py.Group, table: str) -> bool:
    """True when ``table`` exists (archives of an older schema lack the newer tables)."""
    return table in root and isinstance(root[table], h5py.Group)


def keep_rows(root: h5py.Group, table: str, keep: np.ndarray, remap: Mapping[str, np.ndarray] | None = None) -> int:
    """Rewrite ``table`` with only the rows where ``keep`` is True; return the rows removed.

    ``remap`` maps a row-number column (e.g. ``exposure``) to an array giving each old
    row number its new one, for tables whose rows moved.  Used only by night removal,
    inside a transaction.
    """
    keep = np.asarray(keep, dtype=bool)
    if keep.size != n_rows(root, table):
        raise ValueError(f"table {table}: keep mask of {keep.size} rows for {n_rows(root, table)}")
    n_keep = int(keep.sum())
    for col, code in TABLES[table].items():
        ds = root[table][col]
        data = (ds.asstr()[()] if code == STR else ds[()])[keep]  # fixed text stays bytes
        if remap and col in remap:
            data = remap[col][data]
        ds.resize((n_keep,))
        if n_keep:
            ds[:] = np.array([str(v) for v in data], dtype=object) if code == STR else _as_numbers(data, code, table, col)
    return int(keep.size - n_keep)
