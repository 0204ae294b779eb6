"""The archive's layout: schema version, tables and their column types.

Every table is an HDF5 group holding one 1-D dataset per column, all of the same
length (a column store: cheap appends, and a reader takes only the columns it
needs).  Text columns are variable-length UTF-8; stars and bands are stored as
small integer codes into ``/stars/id`` and ``/bands/name``.  The layout is
documented for people in ``docs/archive-format.md``; keep the two in step.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from ..errors import ArchiveError

if TYPE_CHECKING:  # pragma: no cover
    import h5py

FORMAT_NAME = "varstar-archive"
SCHEMA_VERSION = 3

#: Tables each older schema lacks; :mod:`.integrity` adds them on ``varstar upgrade``.
ADDED_IN = {2: ("timings", "ephemerides", "digests", "removals"), 3: ("descriptions",)}
#: Columns whose type a schema changed (from variable-length text to fixed ASCII).
RETYPED_IN = {2: (("sources", "sha256"), ("nights", "label"))}

STR = "str"  # marker for variable-length UTF-8 text
# Codes "S<n>" are fixed-length ASCII text of at most n bytes, for columns that are read
# whole on every ingest (file checksums, night labels): HDF5 reads them as one block,
# where variable-length text costs a heap lookup per row.

TABLES: dict[str, dict[str, str]] = {
    "bands": {"name": STR},
    "stars": {"id": STR, "role": STR},
    "nights": {
        "night": "i4",
        "label": "S10",
        "ingested_utc": STR,
        "software": STR,
        "n_exposures": "i4",
        "n_flagged": "i4",
        "n_points": "i8",
        "bjd_start": "f8",
        "bjd_end": "f8",
        "report": STR,
    },
    "sources": {"night": "i4", "name": STR, "sha256": "S64", "n_rows": "i8"},
    "exposures": {
        "night": "i4",
        "frame": STR,
        "band": "u1",
        "jd_utc": "f8",
        "bjd_tdb": "f8",
        "hjd_utc": "f8",
        "airmass": "f8",
        "airmass_given": "f8",
        "exptime_s": "f8",
        "zero_point": "f8",
        "zero_point_err": "f8",
        "calibration_err": "f8",
        "n_comparisons": "i2",
        "flags": STR,
    },
    "raw": {
        "night": "i4",
        "exposure": "i8",
        "star": "u2",
        "mag": "f8",
        "mag_err": "f8",
        "flag": "i4",
        "source": "i4",
        "line": "i8",
    },
    "points": {
        "night": "i4",
        "exposure": "i8",
        "star": "u2",
        "band": "u1",
        "bjd_tdb": "f8",
        "mag": "f8",
        "mag_err": "f8",
        "cal_err": "f8",
        "quality": "u1",
        "mag_std": "f8",
        "mag_std_err": "f8",
        "cal_std_err": "f8",
        "bv_std": "f8",
        "bv_std_err": "f8",
        "bv_std_sys_err": "f8",
        "colour_gap_d": "f8",
        "transformation": "i4",
    },
    "comparisons": {
        "night": "i4",
        "band": "u1",
        "star": "u2",
        "status": STR,
        "reason": STR,
        "offset": "f8",
        "excess": "f8",
        "chi2_dof": "f8",
        "tie_weight": "f8",
        "mean_err": "f8",
    },
    "ensembles": {
        "night": "i4",
        "band": "u1",
        "calibration_err": "f8",
        "colour_extinction": "f8",
        "colour_extinction_err": "f8",
        "colour_reference": "f8",
        "n_kept": "i4",
    },
    "transformations": {
        "transformation": "i4",
        "set_utc": STR,
        "source": STR,
        "epsilon_v": "f8",
        "epsilon_v_err": "f8",
        "mu_bv": "f8",
        "mu_bv_err": "f8",
        "k2_bv": "f8",
        "k2_bv_err": "f8",
        "max_gap_d": "f8",
    },
    "periods": {
        "analysis": "i4",
        "computed_utc": STR,
        "software": STR,
        "star": STR,
        "bands": STR,
        "method": STR,
        "nterms": "i4",
        "n_points": "i8",
        "nights": STR,
        "baseline_days": "f8",
        "period": "f8",
        "period_err": "f8",
        "epoch": "f8",
        "epoch_err": "f8",
        "amplitude": "f8",
        "fap": "f8",
        "result": STR,
    },
    "timings": {
        "timing": "i4",
        "computed_utc": STR,
        "software": STR,
        "night": "i4",
        "band": "u1",
        "type": STR,
        "method": STR,
        "bjd_tdb": "f8",
        "err": "f8",
        "check_method": STR,
        "check_bjd_tdb": "f8",
        "check_err": "f8",
        "disagree": "u1",
        "cycle": "f8",
        "o_minus_c": "f8",
        "ephemeris": "i4",
        "n_points": "i4",
        "note": STR,
    },
    "ephemerides": {
        "ephemeris": "i4",
        "set_utc": STR,
        "source": STR,
        "kind": STR,
        "epoch": "f8",
        "epoch_err": "f8",
        "period": "f8",
        "period_err": "f8",
        "quadratic": "f8",
        "quadratic_err": "f8",
        "chi2": "f8",
        "dof": "i4",
        "n_timings": "i4",
        "note": STR,
    },
    "digests": {"night": "i4", "table": STR, "n_rows": "i8", "sha256": STR},
    "removals": {
        "night": "i4",
        "label": STR,
        "removed_utc": STR,
        "software": STR,
        "n_exposures": "i4",
        "n_points": "i8",
        "sources": STR,
        "reason": STR,
    },
    # every version of the target description, the first the one the archive was created with;
    # the last is the one in force (and is also in /target)
    "descriptions": {
        "description": "i4",
        "set_utc": STR,
        "software": STR,
        "toml": STR,
        "note": STR,
        "rereduced": STR,
    },
}

#: What a night's checksum covers, per table: the columns that never change after
#: ingest (``varstar transform`` rewrites only the standard-system columns of
#: ``/points``).  Row-number columns are hashed relative to the night's first row
#: in the table they point to, so removing another night does not change them.
DIGEST_COLUMNS: dict[str, tuple[str, ...]] = {
    "sources": ("night", "name", "sha256", "n_rows"),
    "exposures": tuple(TABLES["exposures"]),
    "raw": tuple(TABLES["raw"]),
    "points": ("night", "exposure", "star", "band", "bjd_tdb", "mag", "mag_err", "cal_err", "quality"),
    "comparisons": tuple(TABLES["comparisons"]),
    "ensembles": tuple(TABLES["ensembles"]),
}

#: Row-number columns and the table whose rows they count.
ROW_REFERENCES = {"exposure": "exposures", "source": "sources"}

#: Code columns and the lookup column whose row numbers they hold (``band`` = row of
#: ``/bands/name``).  A code column's integer type bounds how many names the lookup
#: can hold: :func:`code_capacity`.
CODES = {"band": ("bands", "name"), "star": ("stars", "id")}


def code_capacity(code_column: str) -> int:
    """How many names the codes of ``code_column`` (``band`` or ``star``) can address.

    The smallest integer type any table gives that column decides (``uint8`` band
    codes: 256 bands; ``uint16`` star codes: 65,536 stars).  Columns of that name
    holding text (``/periods/star`` keeps the star id itself) are not codes.
    """
    import numpy as np

    kinds = {cols[code_column] for cols in TABLES.values() if code_column in cols and cols[code_column][0] in "iu"}
    return min(int(np.iinfo(np.dtype(k)).max) + 1 for k in kinds)


def check_root(f: h5py.File, path: Path, *, writing: bool = False) -> None:
    """Refuse files that are not varstar archives of a schema this version reads.

    With ``writing``, also refuse an older schema: it must be upgraded first
    (``varstar upgrade``, which keeps a backup), never silently.
    """
    if f.attrs.get("format") != FORMAT_NAME:
        raise ArchiveError(f"{path}: not a varstar archive (no '{FORMAT_NAME}' format mark)")
    version = int(f.attrs.get("schema_version", -1))
    if version > SCHEMA_VERSION:
        raise ArchiveError(
            f"{path}: archive schema {version} is newer than this varstar understands ({SCHEMA_VERSION}); upgrade varstar"
        )
    if version < 1:
        raise ArchiveError(f"{path}: archive has no valid schema version")
    if writing and version < SCHEMA_VERSION:
        raise ArchiveError(
            f"{path}: archive schema {version} is older than this varstar's {SCHEMA_VERSION}; it can be read, but "
            f"run 'varstar upgrade {path}' first to change it (the upgrade keeps a backup copy)"
        )
