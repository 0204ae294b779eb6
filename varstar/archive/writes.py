"""Every change an archive knows how to make, inside one atomic transaction.

:class:`ArchiveWriter` wraps the file a :func:`.transaction.transaction` opened
for writing: the workflows (:mod:`varstar.workflows`) say *what* to record — a
reduced night, a removal, a coefficient set and the standard-system values, a
period analysis, timings, an ephemeris — and the writer knows *where*: table
names, codes, row numbers and checksums never leave this package.  Get one with
:meth:`varstar.archive.Archive.writing`; everything written in its ``with`` block
commits together or not at all.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .. import __version__
from ..results import plain, utc_now
from . import records, tables
from .integrity import night_digests_of_range
from .layout import DIGEST_COLUMNS, TABLES

if TYPE_CHECKING:  # pragma: no cover
    import h5py

    from ..transform import Coefficients


def add_transformation(f: h5py.File, coeffs: Coefficients, max_gap_d: float, now: str) -> int:
    """Append a coefficient set to the transformation history of an open file; return its number."""
    tid = tables.n_rows(f, "transformations")
    tables.append(f, "transformations", {
        "transformation": [tid],
        "set_utc": [now],
        "source": [coeffs.source],
        **{k: [float(getattr(coeffs, k))] for k in ("epsilon_v", "epsilon_v_err", "mu_bv", "mu_bv_err", "k2_bv", "k2_bv_err")},
        "max_gap_d": [max_gap_d],
    })
    return tid


def _columns(df: pd.DataFrame, table: str, **computed: Any) -> dict[str, Any]:
    """The stored columns of ``table``: ``computed`` ones, then every other one ``df`` holds under its name."""
    return {**computed, **{c: df[c].to_numpy() for c in TABLES[table] if c not in computed and c in df}}


class ArchiveWriter:
    """The changes of one transaction on an archive (see the module docstring).

    Parameters
    ----------
    f
        The file a writing transaction opened.
    path
        The archive's path (for messages).
    now
        The time stamp everything this change records (default: the current UTC time).
    """

    def __init__(self, f: h5py.File, path: Path, *, now: str | None = None) -> None:
        self._f = f
        self.path = path
        self.now = now or utc_now()
        self.software = f"varstar {__version__}"

    # -- what is there (read inside the change, under the writer's lock) -------------------
    def nights(self) -> pd.DataFrame:
        """Number and label of every stored night."""
        return records.night_labels(self._f)

    def source_hashes(self) -> set[str]:
        """Checksums of every stored source file."""
        return records.source_hashes(self._f)

    def source_hashes_outside(self, labels: set[str]) -> set[str]:
        """Checksums of the stored source files of every night but those labelled ``labels``."""
        nights = self.nights()
        dropping = set(nights.loc[nights["label"].isin(labels), "night"].astype(int))
        src = tables.read(self._f, "sources", ["night", "sha256"])
        return {h for n, h in zip(src["night"], src["sha256"]) if int(n) not in dropping}

    def active_transformation(self) -> tuple[int, Coefficients, float] | None:
        """The coefficients in force, as :meth:`varstar.archive.Archive.active_transformation`."""
        return records.active_transformation(self._f)

    def n_ephemerides(self) -> int:
        """How many ephemerides the history holds."""
        return tables.n_rows(self._f, "ephemerides")

    # -- nights -----------------------------------------------------------------------------
    def append_night(
        self, red: Any, sha_of: Mapping[str, str], *, night_id: int | None = None, ingested_utc: str | None = None
    ) -> int:
        """Store one reduced night with its raw measurements, sources and checksums; return its number.

        ``red`` is a :class:`varstar.workflows.reduce.NightReduction`: its
        ``exposures``, ``raw``, ``points``, ``comparisons`` and ``ensembles``
        DataFrames carry the stored tables' column names (stars and bands by
        name, exposures numbered from 0 within the night), with its ``label``
        and ``report``.  ``sha_of`` maps each source name in ``red.raw["source"]``
        to its file's SHA-256.  ``night_id`` and ``ingested_utc`` are given by
        :meth:`replace_reductions` only (a night stored again keeps them).
        """
        f = self._f
        stars = pd.Index(tables.read(f, "stars", ["id"])["id"])
        # never reuse the number of a removed night: its removal record keeps it
        if night_id is None:
            used = np.concatenate([tables.read(f, "nights", ["night"])["night"], tables.read(f, "removals", ["night"])["night"]])
            night_id = int(used.max()) + 1 if used.size else 0
        starts = {t: tables.n_rows(f, t) for t in DIGEST_COLUMNS}
        band_code = {b: tables.code_of(f, "bands", "name", b, add=True) for b in sorted(pd.unique(red.exposures["band"]))}
        src_names = sorted(pd.unique(red.raw["source"]))
        first_src = tables.n_rows(f, "sources")
        tables.append(f, "sources", {
            "night": [night_id] * len(src_names),
            "name": [Path(s).name for s in src_names],
            "sha256": [sha_of[s] for s in src_names],
            "n_rows": [int((red.raw["source"] == s).sum()) for s in src_names],
        })
        src_code = {s: first_src + k for k, s in enumerate(src_names)}
        e, r, p, c, en = red.exposures, red.raw, red.points, red.comparisons, red.ensembles
        first_exp = tables.append(f, "exposures", _columns(
            e, "exposures", night=np.full(len(e), night_id), band=e["band"].map(band_code).to_numpy()))
        tables.append(f, "raw", _columns(
            r, "raw", night=np.full(len(r), night_id), exposure=first_exp + r["exposure"].to_numpy(),
            star=stars.get_indexer(r["star"]), source=r["source"].map(src_code).to_numpy()))
        tables.append(f, "points", _columns(
            p, "points", night=np.full(len(p), night_id), exposure=first_exp + p["exposure"].to_numpy(),
            star=stars.get_indexer(p["star"]), band=p["band"].map(band_code).to_numpy()))
        tables.append(f, "comparisons", _columns(
            c, "comparisons", night=np.full(len(c), night_id), band=c["band"].map(band_code).to_numpy(),
            star=stars.get_indexer(c["star"])))
        tables.append(f, "ensembles", _columns(
            en, "ensembles", night=np.full(len(en), night_id), band=en["band"].map(band_code).to_numpy()))
        tables.append(f, "nights", {
            "night": [night_id],
            "label": [red.label],
            "ingested_utc": [ingested_utc or self.now],
            "software": [self.software],
            "n_exposures": [len(e)],
            "n_flagged": [int((e["flags"] != "").sum())],
            "n_points": [len(p)],
            "bjd_start": [red.report["bjd_start"]],
            "bjd_end": [red.report["bjd_end"]],
            "report": [json.dumps(red.report, allow_nan=True)],
        })
        # the night's checksums, from the rows just written (cost independent of the archive's size)
        ranges = {t: (starts[t], tables.n_rows(f, t)) for t in DIGEST_COLUMNS}
        tables.append(f, "digests", night_digests_of_range(f, night_id, ranges))
        return night_id

    def _night_row(self, label: str) -> tuple[int, dict[str, Any]]:
        """The row of ``/nights`` of the night ``label`` and its values; a missing night is an input error."""
        nights = tables.read(self._f, "nights", ["night", "label", "n_exposures", "n_points", "ingested_utc"])
        hit = np.flatnonzero(nights["label"] == label)
        if hit.size == 0:
            raise records.no_such_night(self.path, label, [str(x) for x in nights["label"]], changing=True)
        i = int(hit[0])
        return int(nights["night"][i]), {k: v[i] for k, v in nights.items()}

    def _remove_night_rows(self, night_ids: Sequence[int]) -> list[str]:
        """Take every row of the nights ``night_ids`` out of every table, in one pass; return their source file names.

        The row numbers other tables hold into the exposures and sources are renumbered.
        """
        f = self._f
        ids = np.asarray(list(night_ids), dtype=np.int64)
        src = tables.read(f, "sources", ["night", "name"])
        names = sorted(set(src["name"][np.isin(src["night"], ids)].tolist()))
        remap = {}
        for ref, col in (("exposures", "exposure"), ("sources", "source")):
            keep = ~np.isin(f[ref]["night"][()], ids)
            remap[col] = np.cumsum(keep) - 1  # old row -> new row (rows that stay)
        for t in ("raw", "points", "exposures", "sources", "comparisons", "ensembles", "timings", "digests"):
            keep = ~np.isin(f[t]["night"][()], ids)
            tables.keep_rows(f, t, keep, {c: m for c, m in remap.items() if c in TABLES[t]})
        tables.keep_rows(f, "nights", ~np.isin(f["nights"]["night"][()], ids))
        return names

    def drop_night(self, label: str, *, reason: str) -> dict[str, Any]:
        """Take every row of the night ``label`` out and record the removal.

        Returns the night, its counts, its source files and the reason.
        """
        night_id, row = self._night_row(label)
        names = self._remove_night_rows([night_id])
        tables.append(self._f, "removals", {
            "night": [night_id], "label": [label], "removed_utc": [self.now], "software": [self.software],
            "n_exposures": [int(row["n_exposures"])], "n_points": [int(row["n_points"])],
            "sources": [", ".join(names)], "reason": [reason],
        })
        return {"night": label, "n_exposures": int(row["n_exposures"]), "n_points": int(row["n_points"]),
                "sources": names, "reason": reason}

    def replace_reductions(self, reductions: Sequence[Any]) -> list[int]:
        """Put new reductions of stored nights in place of their old ones; return the nights' numbers.

        Each of ``reductions`` (a :class:`varstar.workflows.reduce.NightReduction`
        of a night's stored raw measurements, labelled as the night) replaces
        every row the old reduction made; the raw measurements and sources are
        written back as they were (with their checksums), and the night keeps
        its number and ingest date.  Its timings, measured on the old
        reduction, go with it.  The old rows of all the nights leave in one pass
        over the tables, so the cost does not grow with the square of their number.
        """
        rows = [self._night_row(red.label) for red in reductions]
        src = tables.read(self._f, "sources", ["night", "name", "sha256"])
        sha = {int(n): {} for n, _ in rows}
        for k, name, h in zip(src["night"], src["name"], src["sha256"]):
            if int(k) in sha:
                sha[int(k)][str(name)] = str(h)
        self._remove_night_rows([n for n, _ in rows])
        return [self.append_night(red, sha[n], night_id=n, ingested_utc=str(row["ingested_utc"]))
                for red, (n, row) in zip(reductions, rows)]

    # -- the target description -------------------------------------------------------------
    def description_in_force(self) -> int:
        """The number of the target description in force."""
        return records.description_in_force(self._f)

    def set_description(self, target: Any, note: str, rereduced: Sequence[str]) -> int:
        """Make ``target`` (a :class:`varstar.target.Target`) the description in force; return its number.

        The earlier versions stay in ``/descriptions``; ``/target`` holds the new
        text; ``/stars`` gets the new roles, and stars the archive has not known
        are appended (a star never leaves ``/stars``: its code must keep its meaning).
        """
        f = self._f
        number = tables.n_rows(f, "descriptions")
        tables.append(f, "descriptions", {
            "description": [number], "set_utc": [self.now], "software": [self.software], "toml": [target.source_text],
            "note": [note], "rereduced": [", ".join(rereduced)],
        })
        g = f["target"]
        g.attrs["toml"], g.attrs["name"] = target.source_text, target.name
        g.attrs["ra_deg"], g.attrs["dec_deg"] = target.ra_deg, target.dec_deg
        ids = list(tables.read(f, "stars", ["id"])["id"])
        row_of = {sid: k for k, sid in enumerate(ids)}
        new = [s for s in target.stars if s.id not in row_of]
        for s in target.stars:
            if s.id in row_of:
                f["stars"]["role"][row_of[s.id]] = s.role
        if new:
            tables.append(f, "stars", {"id": [s.id for s in new], "role": [s.role for s in new]})
        return number

    # -- the standard system ----------------------------------------------------------------
    def add_transformation(self, coeffs: Coefficients, max_gap_d: float) -> int:
        """Append a coefficient set to the transformation history; return its number."""
        return add_transformation(self._f, coeffs, max_gap_d, self.now)

    def night_tables(self) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
        """Every stored light-curve point, comparison-star row and ensemble row, decoded.

        Returns ``(points, comparisons, ensembles)``; stars and bands by name, a
        ``night`` number on each row, and each point's exposure ``airmass``.
        """
        f = self._f
        stars = tables.read(f, "stars", ["id"])["id"]
        bands = tables.read(f, "bands", ["name"])["name"]
        p = tables.read(f, "points", ["night", "exposure", "star", "band", "bjd_tdb", "mag", "mag_err", "cal_err", "quality"])
        airmass = tables.read(f, "exposures", ["airmass"])["airmass"]
        c = tables.read(f, "comparisons")
        en = tables.read(f, "ensembles")

        def names(lookup: np.ndarray, codes: np.ndarray) -> np.ndarray:
            return lookup[codes] if codes.size else np.array([], dtype=object)

        points = pd.DataFrame({**p, "star": names(stars, p["star"]), "band": names(bands, p["band"]),
                               "airmass": airmass[p["exposure"]]}).drop(columns="exposure")
        comps = pd.DataFrame({**c, "star": names(stars, c["star"]), "band": names(bands, c["band"])})
        ens = pd.DataFrame({**en, "band": names(bands, en["band"])})
        return points, comps, ens

    def set_standard_columns(self, values: Mapping[str, np.ndarray]) -> None:
        """Overwrite the standard-system columns of every point (arrays in stored row order)."""
        n = tables.n_rows(self._f, "points")
        for k, v in values.items():
            if k not in TABLES["points"] or len(v) != n:
                raise ValueError(f"standard-system column {k!r}: not a point column of length {n}")
            self._f["points"][k][...] = v

    # -- analyses ---------------------------------------------------------------------------
    def append_period(self, record: Mapping[str, Any], columns: Mapping[str, Any]) -> int:
        """Record a period analysis; return its number in the history.

        ``columns`` holds the history's searchable columns (period, errors,
        method, ...); ``record`` the whole JSON record, stored with its number.
        """
        analysis = tables.n_rows(self._f, "periods")
        tables.append(self._f, "periods", {
            "analysis": [analysis], "computed_utc": [record["computed_utc"]], "software": [record["software"]],
            **{k: [v] for k, v in columns.items()},
            "result": [json.dumps(plain(dict(record, analysis=analysis)), allow_nan=False, ensure_ascii=False)],
        })
        return analysis

    def append_ephemeris(self, eph: Any, source: str, fit: Any = None, note: str = "") -> int:
        """Add an ephemeris (and the fit that produced it, if any) to the history; return its number."""
        number = tables.n_rows(self._f, "ephemerides")
        tables.append(self._f, "ephemerides", {
            "ephemeris": [number], "set_utc": [self.now], "source": [source], "kind": [eph.kind],
            "epoch": [eph.epoch], "epoch_err": [eph.epoch_err], "period": [eph.period], "period_err": [eph.period_err],
            "quadratic": [eph.quadratic], "quadratic_err": [eph.quadratic_err],
            "chi2": [fit.chi2 if fit is not None else float("nan")], "dof": [fit.dof if fit is not None else 0],
            "n_timings": [fit.n_timings if fit is not None else 0], "note": [note],
        })
        return number

    def append_timings(self, rows: Sequence[Mapping[str, Any]]) -> list[int]:
        """Store timings (one mapping each: the timing columns, with ``night`` a label and ``band`` a name)."""
        if not rows:
            return []
        f = self._f
        bands = {b: tables.code_of(f, "bands", "name", b, add=False) for b in {r["band"] for r in rows}}
        night_no = dict(zip(*(self.nights()[c].tolist() for c in ("label", "night"))))
        first = tables.n_rows(f, "timings")
        numbers = list(range(first, first + len(rows)))
        cols = {c: [r[c] for r in rows] for c in TABLES["timings"] if c not in ("timing", "computed_utc", "software")}
        cols["night"] = [night_no[r["night"]] for r in rows]
        cols["band"] = [bands[r["band"]] for r in rows]
        tables.append(f, "timings", {"timing": numbers, "computed_utc": [self.now] * len(rows),
                                     "software": [self.software] * len(rows), **cols})
        return numbers
