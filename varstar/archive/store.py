"""Per-target archives: creating one, reading what it holds, and opening a change.

:class:`ArchiveStore` reads (the light curve, nights, comparison stars, the
histories) and opens writing transactions (:meth:`ArchiveStore.writing`,
:mod:`.writes`); it knows nothing of the analyses, which live above it in
:mod:`varstar.workflows` (whose :class:`varstar.Archive` adds them).
"""

from __future__ import annotations

import contextlib
import json
from dataclasses import dataclass
from pathlib import Path
from collections.abc import Iterator, Sequence
from typing import TYPE_CHECKING, Any

import h5py
import numpy as np
import pandas as pd

from .. import __version__
from ..errors import ArchiveError, VarstarError
from ..quality import quality_words
from ..results import Result, utc_now
from ..target import Target, parse_target
from . import records, tables
from .layout import FORMAT_NAME, SCHEMA_VERSION, check_root, code_capacity

if TYPE_CHECKING:  # pragma: no cover
    from ..transform import Coefficients
    from .writes import ArchiveWriter


def create_archive(
    path: str | Path, target: Target, transformation: tuple[Coefficients, float] | None = None
) -> ArchiveStore:
    """Create a new, empty archive for ``target`` at ``path`` (never overwrites).

    ``transformation`` (coefficients, largest B-V pairing gap in days) becomes
    the archive's first coefficient set.
    """
    from .transaction import create_new
    from .writes import add_transformation

    n_max = code_capacity("star")
    if len(target.stars) > n_max:
        raise ArchiveError(
            f"{path}: the target description {target.source} lists {len(target.stars):,} stars; an archive tells at "
            f"most {n_max:,} apart (its star codes are 16-bit), so nothing was created. Keep only the stars the "
            f"reduction uses (the target, its comparison and check stars) in the target file."
        )

    def build(f: h5py.File) -> None:
        f.attrs["format"] = FORMAT_NAME
        f.attrs["schema_version"] = SCHEMA_VERSION
        f.attrs["created_utc"] = utc_now()
        f.attrs["created_by"] = f"varstar {__version__}"
        g = f.create_group("target")
        g.attrs["toml"] = target.source_text
        g.attrs["name"] = target.name
        g.attrs["ra_deg"] = target.ra_deg
        g.attrs["dec_deg"] = target.dec_deg
        tables.create_tables(f)
        tables.append(f, "stars", {"id": [s.id for s in target.stars], "role": [s.role for s in target.stars]})
        tables.append(f, "descriptions", records.first_description(target.source_text, f.attrs["created_utc"], f.attrs["created_by"]))
        if transformation is not None:
            add_transformation(f, transformation[0], transformation[1], utc_now())

    create_new(Path(path), build)
    return ArchiveStore(path)


def open_archive(path: str | Path) -> ArchiveStore:
    """Open an existing archive for reading (changes go through :meth:`ArchiveStore.writing`)."""
    arch = ArchiveStore(path)
    arch.check_format()
    return arch


@dataclass(frozen=True)
class ArchiveSummary(Result):
    """What an archive holds (``varstar summary --json``): target, nights, points per band, analyses."""

    archive: str
    schema_version: int
    created_utc: str
    target: dict[str, Any]
    n_nights: int
    nights: list[dict[str, Any]]
    bands: dict[str, Any]
    analyses: dict[str, Any]


class ArchiveStore:
    """A per-target archive on disk: what it holds, and the one way to change it.

    Every method opens the file, reads what it needs and closes it again, so an
    :class:`ArchiveStore` never holds the file open between calls and always sees the
    last committed state.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)

    # -- low level -----------------------------------------------------------
    def _open(self) -> h5py.File:
        """The archive at its last committed state, read-only; use it in a ``with`` block.

        The file holds the archive's shared read lock until it is closed, so a
        writer never writes into it meanwhile (see :mod:`.transaction`).
        """
        from .transaction import open_read

        return open_read(self.path)

    @contextlib.contextmanager
    def writing(self, *, timeout_s: float = 30.0, now: str | None = None) -> Iterator[ArchiveWriter]:
        """One atomic change: ``with arch.writing() as w: ...`` (see :class:`.writes.ArchiveWriter`).

        Waits up to ``timeout_s`` for another writer; everything written in the
        block commits together, or nothing does.  ``now`` is the time stamp the
        change records (default: the current UTC time; a fixed one makes a
        rebuilt archive byte-identical).
        """
        from .transaction import transaction
        from .writes import ArchiveWriter

        with transaction(self.path, timeout_s=timeout_s) as f:
            yield ArchiveWriter(f, self.path, now=now)

    def check_format(self) -> None:
        with self._open() as f:
            check_root(f, self.path)

    def _decoded_table(self, table: str, start: int = 0) -> pd.DataFrame:
        """A per-night table from row ``start`` on, decoded (see :func:`.records.decoded`)."""
        with self._open() as f:
            return records.decoded(f, table, start)

    # -- contents --------------------------------------------------------------
    @property
    def target(self) -> Target:
        with self._open() as f:
            text = str(f["target"].attrs["toml"])
        try:
            return parse_target(text, source=f"{self.path}:/target")
        except VarstarError as exc:
            # it was valid when the archive was created: the stored copy changed since, or the rules did
            raise ArchiveError(
                f"{self.path}: the target description stored in the archive (/target) cannot be read: {exc}. It was "
                f"valid when the archive was created, so the archive file is probably damaged: run 'varstar verify "
                f"{self.path}', and put back a copy of the archive."
            ) from None

    def descriptions(self) -> pd.DataFrame:
        """Every version of the target description, oldest first (the last is in force): ``description``
        (its number), ``set_utc``, ``software``, ``toml``, ``note``, ``rereduced`` (nights re-reduced under it)."""
        with self._open() as f:
            return records.descriptions(f)

    def description_in_force(self) -> int:
        """The number of the target description in force (the last row of :meth:`descriptions`)."""
        with self._open() as f:
            return records.description_in_force(f)

    def star_ids(self) -> list[str]:
        """Every star the archive has known (its stars are stored under these ids; none ever leaves)."""
        with self._open() as f:
            return [str(x) for x in tables.read(f, "stars", ["id"])["id"]]

    def nights(self) -> pd.DataFrame:
        """One row per ingested night: ``night`` (its label, the evening date), ``night_number``, counts,
        time span, ingest date (``label`` repeats ``night``, its name of earlier releases, for one release)."""
        with self._open() as f:
            d = tables.read(f, "nights")
        df = pd.DataFrame({k: v for k, v in d.items() if k != "report"})
        df.insert(0, "night_number", df.pop("night"))
        df.insert(0, "night", df["label"])
        return df

    def night_reports(self) -> dict[str, dict[str, Any]]:
        """Every night's reduction report, by night label, in one read (for pages and checks over all nights)."""
        with self._open() as f:
            d = tables.read(f, "nights", ["label", "report"])
        return {str(lab): json.loads(rep) for lab, rep in zip(d["label"], d["report"])}

    def night_report(self, label: str) -> dict[str, Any]:
        """The reduction report stored when the night was ingested."""
        reports = self.night_reports()
        if label not in reports:
            raise records.no_such_night(self.path, label, list(reports))
        return reports[label]

    def require_night(self, label: str, *, changing: bool = False) -> None:
        """Refuse (ArchiveError, exit 3) a night label the archive does not hold, naming the nights it has.

        ``changing``: the caller was about to change the archive (the message says nothing changed).
        """
        labels = [str(x) for x in self.nights()["night"]]
        if label not in labels:
            raise records.no_such_night(self.path, label, labels, changing=changing)

    def exposures(self) -> pd.DataFrame:
        """Every exposure with its times, airmass, zero point and flags."""
        return self._decoded_table("exposures")

    def comparisons(self, last_nights: int | None = None) -> pd.DataFrame:
        """Status of every comparison star in every night and band (or in the ``last_nights`` latest nights)."""
        with self._open() as f:
            start = 0
            if last_nights is not None:
                # rows are stored night after night: the latest nights are the table's tail
                night = f["comparisons"]["night"][()]
                recent = np.unique(night)[-last_nights:] if night.size else night
                keep = np.isin(night, recent)
                start = int(np.argmax(keep)) if keep.any() else night.size
                if not keep[start:].all():
                    start = 0
        return self._decoded_table("comparisons", start)

    def ensembles(self) -> pd.DataFrame:
        """Per night and band: calibration error and fitted colour extinction of the ensemble."""
        return self._decoded_table("ensembles")

    def lightcurve(
        self,
        band: str | None = None,
        star: str | None = None,
        *,
        include_flagged: bool = False,
        standard: bool = True,
        columns: Sequence[str] | None = None,
    ) -> pd.DataFrame:
        """The calibrated light curve as a DataFrame, sorted by time.

        Parameters
        ----------
        band
            Only this band (default: every band).
        star
            Star id (default: the target).  Check stars are stored too.
        include_flagged
            Also return points of flagged exposures and upstream-flagged
            measurements (column ``quality`` says why: 0 = good).
        standard
            Give standard-system (transformed) magnitudes where they exist
            (default); False gives the untransformed ones everywhere.

        Returns
        -------
        pandas.DataFrame
            Columns ``bjd_tdb, hjd_utc, jd_utc, band, star, mag, mag_err,
            cal_err, transformed, bv, bv_err, bv_sys_err, mag_untransformed,
            mag_untransformed_err, cal_untransformed_err, colour_gap_d,
            epsilon_v, mu_bv, k2_bv, airmass, night, frame, quality, flags``.
            ``mag_err`` is the point's own 1-sigma (measurement, exposure zero
            point and, when transformed, the other band's interpolated
            magnitude); ``cal_err`` is the night's systematic uncertainty shared
            by all its points in that band (catalogue tie and, when
            transformed, the coefficients).  ``bv`` is the star's standard
            B - V at that time (transformed points only; ``bv_sys_err`` its
            systematic 1-sigma for the night); ``epsilon_v``,
            ``mu_bv``, ``k2_bv`` are the coefficients used (NaN if none).
        columns
            Only these columns (in this order); the archive then reads only what
            they need, which matters for long archives (the text columns
            ``frame`` and ``flags`` are the slowest to read).
        """
        wanted = list(LIGHTCURVE_FIELDS) if columns is None else list(columns)
        unknown = [c for c in wanted if c not in LIGHTCURVE_FIELDS]
        if unknown:
            raise ArchiveError(f"unknown light-curve column(s) {unknown}; choose from {', '.join(LIGHTCURVE_FIELDS)}")
        need_p = {"star", "band", "quality", "bjd_tdb", "transformation"}
        need_e: set[str] = set()
        for c in wanted:
            src = LIGHTCURVE_FIELDS[c]
            need_p.update(src[0])
            need_e.update(src[1])
        if need_e:
            need_p.add("exposure")
        with self._open() as f:
            stars = tables.read(f, "stars", ["id"])["id"]
            bands = tables.read(f, "bands", ["name"])["name"]
            roles = tables.read(f, "stars", ["role"])["role"]
            if star is None:
                star = str(stars[list(roles).index("target")])
            if star not in stars:
                raise ArchiveError(f"{self.path}: no star '{star}' (stars: {', '.join(stars)})")
            if roles[list(stars).index(star)] == "comparison":
                raise ArchiveError(
                    f"{self.path}: '{star}' is a comparison star; light curves are kept for the target and "
                    f"check stars (a comparison star's behaviour is in 'varstar report')"
                )
            if band is not None and band not in bands:
                raise ArchiveError(f"{self.path}: no observations in band '{band}' (bands: {', '.join(bands) or 'none'})")
            sel = tables.read(f, "points", ["star", "band", "quality"])
            keep = sel["star"] == list(stars).index(star)
            if band is not None:
                keep &= sel["band"] == list(bands).index(band)
            if not include_flagged:
                keep &= sel["quality"] == 0
            p = {k: v[keep] for k, v in tables.read(f, "points", sorted(need_p - {"star", "quality"} | {"band"})).items()}
            p["quality"] = sel["quality"][keep]
            exp_idx = p.get("exposure", np.zeros(0, dtype=np.int64))
            e: dict[str, np.ndarray] = {}
            for col in need_e - {"flags"}:
                ds = f["exposures"][col]
                e[col] = (ds.asstr()[()] if col == "frame" else ds[()])[exp_idx]
            if "flags" in need_e:
                # the exposure's flags matter only for flagged points: read just those rows (text is slow)
                e["flags"] = np.full(len(exp_idx), "", dtype=object)
                flagged = np.flatnonzero(p["quality"] != 0)
                if flagged.size:
                    rows, inverse = np.unique(exp_idx[flagged], return_inverse=True)
                    e["flags"][flagged] = np.asarray(f["exposures"]["flags"].asstr()[rows], dtype=object)[inverse]
            labels = tables.read(f, "nights", ["night", "label"]) if "night" in wanted else None
            trans = tables.read(f, "transformations") if {"epsilon_v", "mu_bv", "k2_bv"} & set(wanted) else None
        done = p["transformation"] >= 0
        use = done & standard
        tid = np.where(done, p["transformation"], 0)

        def coeff(name: str) -> np.ndarray:
            if trans is None or trans["transformation"].size == 0:
                return np.full(len(tid), np.nan)
            return np.where(done, trans[name][tid], np.nan)

        n = int(keep.sum())
        make = {
            "bjd_tdb": lambda: p["bjd_tdb"],
            "hjd_utc": lambda: e["hjd_utc"],
            "jd_utc": lambda: e["jd_utc"],
            "band": lambda: bands[p["band"]] if n else np.array([], dtype=object),
            "star": lambda: np.full(n, star, dtype=object),
            "mag": lambda: np.where(use, p["mag_std"], p["mag"]),
            "mag_err": lambda: np.where(use, p["mag_std_err"], p["mag_err"]),
            "cal_err": lambda: np.where(use, p["cal_std_err"], p["cal_err"]),
            "transformed": lambda: use,
            "bv": lambda: p["bv_std"],
            "bv_err": lambda: p["bv_std_err"],
            "bv_sys_err": lambda: p["bv_std_sys_err"],
            "mag_untransformed": lambda: p["mag"],
            "mag_untransformed_err": lambda: p["mag_err"],
            "cal_untransformed_err": lambda: p["cal_err"],
            "colour_gap_d": lambda: p["colour_gap_d"],
            "epsilon_v": lambda: coeff("epsilon_v"),
            "mu_bv": lambda: coeff("mu_bv"),
            "k2_bv": lambda: coeff("k2_bv"),
            "airmass": lambda: e["airmass"],
            "night": lambda: records.labels_of(pd.DataFrame(labels), p["night"]),
            "frame": lambda: e["frame"],
            "quality": lambda: p["quality"],
            "flags": lambda: quality_words(p["quality"], e["flags"]),
        }
        df = pd.DataFrame({c: make[c]() for c in wanted})
        rank = np.argsort(np.argsort(np.asarray(bands, dtype=str))) if len(bands) else np.zeros(0, dtype=int)
        order = np.lexsort((rank[p["band"]] if n else p["band"], p["bjd_tdb"]))  # by time, then band name
        return df.iloc[order].reset_index(drop=True)

    def periods(self) -> pd.DataFrame:
        """The period history: every stored analysis, oldest first (``result`` is its JSON record)."""
        with self._open() as f:
            if not tables.has_table(f, "periods"):
                raise ArchiveError(f"{self.path}: this archive has no period table")
            return records.history(f, "periods")

    def timings(self) -> pd.DataFrame:
        """Every stored timing, in time order (night label and band name decoded; see :func:`.records.decoded`)."""
        with self._open() as f:
            return records.timings(f)

    def ephemerides(self) -> pd.DataFrame:
        """The ephemeris history, oldest first; the last entry is in force."""
        with self._open() as f:
            return records.history(f, "ephemerides")

    def source_hashes(self) -> set[str]:
        """SHA-256 checksums of every stored source file (to skip files already ingested)."""
        with self._open() as f:
            return records.source_hashes(f)

    def active_transformation(self) -> tuple[int, Coefficients, float] | None:
        """The coefficients in force: ``(number, coefficients, max_gap_d)``, or None before the first set."""
        with self._open() as f:
            return records.active_transformation(f)

    def transformations(self) -> pd.DataFrame:
        """Every coefficient set the archive has used, oldest first (the last is in force)."""
        with self._open() as f:
            return pd.DataFrame(tables.read(f, "transformations"))

    def raw(self) -> pd.DataFrame:
        """The measurements exactly as ingested, one row per star per exposure."""
        with self._open() as f:
            r = tables.read(f, "raw")
            e = tables.read(f, "exposures", ["frame", "band", "jd_utc", "airmass_given", "exptime_s"])
            stars = tables.read(f, "stars", ["id"])["id"]
            bands = tables.read(f, "bands", ["name"])["name"]
            src = tables.read(f, "sources", ["name"])["name"]
        x = r["exposure"]
        return pd.DataFrame(
            {
                "source": src[r["source"]] if len(x) else np.array([], dtype=object),
                "line": r["line"],
                "frame": e["frame"][x],
                "jd": e["jd_utc"][x],
                "band": bands[e["band"][x]] if len(x) else np.array([], dtype=object),
                "star": stars[r["star"]] if len(x) else np.array([], dtype=object),
                "mag": r["mag"],
                "mag_err": r["mag_err"],
                "airmass": e["airmass_given"][x],
                "exptime_s": e["exptime_s"][x],
                "flag": r["flag"],
                "night": r["night"],
            }
        )

    def summary(self) -> ArchiveSummary:
        """An overview: target, nights, points per band, magnitude ranges, the analyses stored."""
        tgt = self.target
        nights = self.nights()
        lc = self.lightcurve(include_flagged=True, columns=["bjd_tdb", "band", "mag", "mag_err", "transformed", "quality"])
        good = lc[lc["quality"] == 0]
        bands = {}
        for b, g in good.groupby("band", sort=True):
            bands[str(b)] = {
                "n_points": int(len(g)),
                "n_flagged": int(((lc["band"] == b) & (lc["quality"] != 0)).sum()),
                "n_standard": int(g["transformed"].sum()),
                "mag_min": float(g["mag"].min()),
                "mag_max": float(g["mag"].max()),
                "median_mag_err": float(g["mag_err"].median()),
                "bjd_first": float(g["bjd_tdb"].min()),
                "bjd_last": float(g["bjd_tdb"].max()),
            }
        with self._open() as f:
            schema = int(f.attrs["schema_version"])
            created = str(f.attrs.get("created_utc", ""))
            counts = {t: tables.n_rows(f, t) if tables.has_table(f, t) else 0
                      for t in ("periods", "timings", "ephemerides", "removals")}
            last_period = None
            if counts["periods"]:
                k = counts["periods"] - 1
                last_period = {c: f["periods"][c][k] for c in ("period", "period_err")}
                last_period = {c: float(v) for c, v in last_period.items()}
                last_period["computed_utc"] = f["periods"]["computed_utc"].asstr()[k]
        return ArchiveSummary(**{
            "archive": str(self.path),
            "schema_version": schema,
            "created_utc": created,
            "target": {"name": tgt.name, "ra_deg": tgt.ra_deg, "dec_deg": tgt.dec_deg, "star": tgt.target_star.id},
            "n_nights": int(len(nights)),
            "nights": [
                {
                    "night": str(r.night),
                    "label": str(r.night),  # the old name, kept for one release (README: Changes)
                    "n_exposures": int(r.n_exposures),
                    "n_flagged": int(r.n_flagged),
                    "ingested_utc": str(r.ingested_utc),
                }
                for r in nights.itertuples()
            ],
            "bands": bands,
            "analyses": {"n_periods": counts["periods"], "last_period": last_period, "n_timings": counts["timings"],
                         "n_ephemerides": counts["ephemerides"], "n_removed": counts["removals"]},
        })


#: Light-curve columns and what each reads: (``/points`` columns, ``/exposures`` columns).
LIGHTCURVE_FIELDS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "bjd_tdb": (("bjd_tdb",), ()),
    "hjd_utc": ((), ("hjd_utc",)),
    "jd_utc": ((), ("jd_utc",)),
    "band": (("band",), ()),
    "star": ((), ()),
    "mag": (("mag", "mag_std"), ()),
    "mag_err": (("mag_err", "mag_std_err"), ()),
    "cal_err": (("cal_err", "cal_std_err"), ()),
    "transformed": ((), ()),
    "bv": (("bv_std",), ()),
    "bv_err": (("bv_std_err",), ()),
    "bv_sys_err": (("bv_std_sys_err",), ()),
    "mag_untransformed": (("mag",), ()),
    "mag_untransformed_err": (("mag_err",), ()),
    "cal_untransformed_err": (("cal_err",), ()),
    "colour_gap_d": (("colour_gap_d",), ()),
    "epsilon_v": ((), ()),
    "mu_bv": ((), ()),
    "k2_bv": ((), ()),
    "airmass": ((), ("airmass",)),
    "night": (("night",), ()),
    "frame": ((), ("frame",)),
    "quality": ((), ()),
    "flags": ((), ("flags",)),
}
