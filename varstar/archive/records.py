"""Decoded records of an open archive file, shared by the readers and the writer.

Each function takes an open :class:`h5py.File` (a reader's or a writer's) and
returns plain values or DataFrames with codes turned into names.  They are the
only decoding of these tables, so :class:`.store.Archive` (between changes) and
:class:`.writes.ArchiveWriter` (inside one) read them the same way.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..errors import ArchiveError
from . import tables

if TYPE_CHECKING:  # pragma: no cover
    import h5py

    from ..transform import Coefficients


def night_labels(f: h5py.File) -> pd.DataFrame:
    """Columns ``night`` (number) and ``label`` (evening date) of every stored night."""
    return pd.DataFrame(tables.read(f, "nights", ["night", "label"]))


def labels_of(nights: pd.DataFrame, numbers: np.ndarray) -> np.ndarray:
    """The label of each night number in ``numbers`` ("?" for an unknown number)."""
    lookup = dict(zip(nights["night"].tolist(), nights["label"].tolist()))
    if not len(numbers):
        return np.array([], dtype=object)
    unique = np.unique(numbers)
    return np.array([lookup.get(int(i), "?") for i in unique], dtype=object)[np.searchsorted(unique, numbers)]


def source_hashes(f: h5py.File) -> set[str]:
    """SHA-256 checksums of every stored source file."""
    return set(tables.read(f, "sources", ["sha256"])["sha256"])


def active_transformation(f: h5py.File) -> tuple[int, Coefficients, float] | None:
    """The coefficients in force (the last ``/transformations`` row): ``(number, coefficients, max_gap_d)``."""
    from ..transform import Coefficients

    rows = tables.read(f, "transformations")
    if rows["transformation"].size == 0:
        return None
    k = -1
    coeffs = Coefficients(
        epsilon_v=float(rows["epsilon_v"][k]),
        epsilon_v_err=float(rows["epsilon_v_err"][k]),
        mu_bv=float(rows["mu_bv"][k]),
        mu_bv_err=float(rows["mu_bv_err"][k]),
        k2_bv=float(rows["k2_bv"][k]),
        k2_bv_err=float(rows["k2_bv_err"][k]),
        source=str(rows["source"][k]),
    )
    return int(rows["transformation"][k]), coeffs, float(rows["max_gap_d"][k])


def no_such_night(path: object, label: str, labels: list[str], *, changing: bool = False) -> ArchiveError:
    """The one message for a night label the archive does not hold (all its nights when few, else the latest)."""
    shown = ", ".join(labels) if len(labels) <= 10 else f"latest {', '.join(labels[-5:])} of {len(labels):,}"
    return ArchiveError(f"{path}: no night '{label}' (nights are evening dates YYYY-MM-DD; {shown or 'none stored'}; "
                        f"'varstar summary' lists them){'; nothing changed' if changing else ''}")


def first_description(toml: str, set_utc: str, software: str) -> dict[str, list]:
    """The ``/descriptions`` row of the description an archive was created with (number 0)."""
    return {"description": [0], "set_utc": [str(set_utc)], "software": [str(software)], "toml": [str(toml)],
            "note": ["the description the archive was created with"], "rereduced": [""]}


def descriptions(f: h5py.File) -> pd.DataFrame:
    """Every version of the target description, oldest first (an archive of schema 2, not upgraded yet, has
    only the one in ``/target``, shown as number 0)."""
    if tables.has_table(f, "descriptions"):
        return pd.DataFrame(tables.read(f, "descriptions"))
    return pd.DataFrame(first_description(f["target"].attrs["toml"], f.attrs.get("created_utc", ""),
                                          f.attrs.get("created_by", "")))


def description_in_force(f: h5py.File) -> int:
    """The number of the target description in force (the last ``/descriptions`` row)."""
    return tables.n_rows(f, "descriptions") - 1 if tables.has_table(f, "descriptions") else 0


def history(f: h5py.File, table: str) -> pd.DataFrame:
    """A history table (periods, ephemerides, timings, ...) whole; empty with its columns in an older schema."""
    if not tables.has_table(f, table):
        return pd.DataFrame(columns=list(tables.TABLES[table]))
    return pd.DataFrame(tables.read(f, table))


def decoded(f: h5py.File, table: str, start: int = 0) -> pd.DataFrame:
    """A per-night table from row ``start`` on, as people read it.

    ``night`` is the night's label (its evening date) and ``night_number`` the
    number the archive files it under; ``band`` and ``star`` are names.  The
    columns ``night_label`` (and ``band_name`` for timings) repeat the label and
    the band under their names of earlier releases, kept for one release.
    """
    df = pd.DataFrame(tables.read(f, table, start=start))
    names = {"band": tables.read(f, "bands", ["name"])["name"], "star": tables.read(f, "stars", ["id"])["id"]}
    for col, lookup in names.items():
        if col in df:
            df[col] = lookup[df[col].to_numpy()] if len(df) else pd.Series(dtype=object)
    labels = labels_of(night_labels(f), df["night"].to_numpy())
    df.insert(df.columns.get_loc("night"), "night_number", df.pop("night"))
    df.insert(df.columns.get_loc("night_number"), "night", labels)
    df["night_label"] = labels
    return df


def timings(f: h5py.File) -> pd.DataFrame:
    """Every stored timing, decoded as :func:`decoded` does, in time order."""
    if not tables.has_table(f, "timings"):
        columns = ["night_number" if c == "night" else c for c in tables.TABLES["timings"]]
        columns.insert(columns.index("night_number"), "night")
        return pd.DataFrame(columns=[*columns, "night_label", "band_name"])
    t = decoded(f, "timings")
    t["band_name"] = t["band"]
    return t.sort_values("bjd_tdb", kind="stable").reset_index(drop=True)
