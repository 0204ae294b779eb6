"""The HTML pages of a night and of an archive (varstar.report).

References: the numbers on the pages are checked against the archive's own
stored records (the night report, ``comparisons()``, ``periods()``,
``timings()``, ``predict()``), which the rest of the suite checks against
simulated truth; HTML is read back with the standard library's
``html.parser`` (the HTML Living Standard's tokeniser, as Python implements
it); a PNG starts with its 8-byte signature (PNG specification, section 5.2).
The verdict thresholds are this module's own choices (its docstring).
"""

from __future__ import annotations

import base64
import json
import math
import re
import shutil
import time
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

import varstar
from varstar import report as R

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2


class Page(HTMLParser):
    """Everything the tests read from a page: tags with attributes, the text of elements with an id,
    the rows of every table with an id, and every attribute value that could fetch something."""

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.ids: set[str] = set()
        self.text_of: dict[str, str] = {}
        self.rows: dict[str, list[tuple[dict[str, str], list[str]]]] = {}
        self._open_ids: list[tuple[str, int]] = []  # (id, depth at open)
        self._depth = 0
        self._table: list[str] = []
        self._row: tuple[dict[str, str], list[str]] | None = None
        self._cell: list[str] | None = None
        self.feed(text)
        self.close()

    VOID = {"meta", "img", "br", "hr", "link", "input", "source", "col", "area", "base", "wbr"}

    def handle_starttag(self, tag, attrs):
        a = {k: (v or "") for k, v in attrs}
        self.tags.append((tag, a))
        if "id" in a:
            self.ids.add(a["id"])
        if tag in self.VOID:
            return
        self._depth += 1
        if "id" in a:
            self._open_ids.append((a["id"], self._depth))
            self.text_of[a["id"]] = ""
        if tag == "table":
            self._table.append(a.get("id", ""))
            self.rows.setdefault(a.get("id", ""), [])
        elif tag == "tr" and self._table:
            self._row = (a, [])
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []

    def handle_endtag(self, tag):
        if tag in self.VOID:
            return
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row[1].append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None:
            if self._row[1] and self._table:
                self.rows[self._table[-1]].append(self._row)
            self._row = None
        elif tag == "table" and self._table:
            self._table.pop()
        while self._open_ids and self._open_ids[-1][1] >= self._depth:
            self._open_ids.pop()
        self._depth -= 1

    def handle_data(self, data):
        for i, _ in self._open_ids:
            self.text_of[i] += data
        if self._cell is not None:
            self._cell.append(data)

    def body_rows(self, table_id: str) -> list[tuple[dict[str, str], list[str]]]:
        """Rows of a table without its header row (the one made of <th> cells)."""
        return self.rows.get(table_id, [])[1:]


@pytest.fixture(scope="module")
def full_archive(demo_archive_path, tmp_path_factory, demo_data) -> Path:
    """A copy of the demo archive on the standard system, with a stored period analysis and timings
    (and the fitted ephemeris made the archive's), so every section of the archive page has content."""
    from varstar.standards import fit_standard_field
    from varstar.workflows.standard import transform_archive

    path = tmp_path_factory.mktemp("report-html") / "full.h5"
    shutil.copy(demo_archive_path, path)
    k2_bv = -0.03  # the usual second-order B - V extinction, as the demo takes it (common practice)
    fit = fit_standard_field([demo_data.folder / "standards.csv"], demo_data.folder / "standards.toml", k2_bv=k2_bv)
    transform_archive(path, fit.coefficients("standards fit", k2_bv=k2_bv), 15.0 / 1440.0)
    arch = varstar.open_archive(path)
    arch.period()
    arch.time_extrema(update=True)
    return path


def _nights(path: Path) -> list[str]:
    return [str(n) for n in varstar.open_archive(path).nights()["night"]]


# --------------------------------------------------------------------------- the verdict


def _expected_ratio(rep: dict) -> tuple[float, str, str]:
    best = (-1.0, "", "")
    for band, b in rep["bands"].items():
        for sid, c in b["check_stars"].items():
            r = c["rms"] / c["predicted_rms"]
            if r > best[0]:
                best = (r, sid, band)
    return best


VERDICT_RE = re.compile(r"^(good|fair|poor) night: (\d+) of (\d+) exposures used; check star (\S+) scatter "
                        r"([0-9.]+)× predicted in (\S+?)(?: \((.*)\))?\.$")


def test_the_verdict_sentence_agrees_with_the_stored_report(demo_archive_path):
    arch = varstar.open_archive(demo_archive_path)
    words = {}
    for night in _nights(demo_archive_path):
        page = Page(R.night_page(demo_archive_path, night))
        sentence = page.text_of["verdict"].strip()
        m = VERDICT_RE.match(sentence)
        assert m, sentence
        rep = arch.night_report(night)
        assert int(m.group(3)) == rep["n_exposures"]
        assert int(m.group(2)) == sum(b["n_used"] for b in rep["bands"].values())
        ratio, star, band = _expected_ratio(rep)
        assert (m.group(4), m.group(6)) == (star, band)
        assert float(m.group(5)) == pytest.approx(ratio, abs=0.005)
        assert sentence.count(". ") == 0 and sentence.endswith(".")  # one sentence
        assert bool(m.group(7)) == (m.group(1) != "good")  # a night that is not good says why
        words[night] = m.group(1)
    # the demo's 2026-09-19 lost 38 of 226 exposures to a passing cloud (83 % used: under 90 %, over 70 %);
    # the other nights used every exposure, with check-star ratios near 1
    assert words.pop("2026-09-19") == "fair"
    assert set(words.values()) == {"good"}


def _report(n_used=(100, 100), n_exp=(100, 100), ratio=1.0, kept=6, checks=True):
    bands = {}
    for band, u, n in zip("BV", n_used, n_exp):
        bands[band] = {"n_exposures": n, "n_used": u, "n_flagged": n - u, "comparisons_kept": [f"C{i}" for i in range(kept)],
                       "check_stars": {"K1": {"n": u, "mean": 13.0, "rms": 0.01 * ratio, "predicted_rms": 0.01}}
                       if checks else {}}
    return {"n_exposures": sum(n_exp), "bands": bands}


@pytest.mark.parametrize("kw, verdict", [
    ({}, "good"),
    ({"n_used": (89, 91)}, "good"),            # 180 of 200 = 90 %: at the threshold, good
    ({"n_used": (89, 90)}, "fair"),            # 179 of 200: under 90 %
    ({"n_used": (70, 70)}, "fair"),            # exactly 70 %: fair, not poor
    ({"n_used": (69, 70)}, "poor"),            # under 70 %
    ({"ratio": 1.5}, "good"),
    ({"ratio": 1.6}, "fair"),
    ({"ratio": 2.1}, "poor"),
    ({"kept": 2}, "fair"),
    ({"kept": 1}, "poor"),
])
def test_verdict_rules(kw, verdict):
    v = R.night_verdict(_report(**kw))
    assert v.verdict == verdict, v.sentence
    assert v.sentence.startswith(f"{verdict} night: ")
    assert bool(v.reasons) == (verdict != "good")


def test_a_night_without_check_star_says_so():
    v = R.night_verdict(_report(checks=False))
    assert v.check_ratio is None and v.verdict == "good"
    assert v.sentence == "good night: 200 of 200 exposures used; no check star to compare."


def test_an_unknown_night_is_refused_naming_the_nights(demo_archive_path):
    with pytest.raises(varstar.errors.ArchiveError, match="2026-09-11"):
        R.night_page(demo_archive_path, "2030-01-01")


# --------------------------------------------------------------------------- the night page's tables


def test_the_comparison_table_is_the_archive_s(demo_archive_path):
    arch = varstar.open_archive(demo_archive_path)
    comps = arch.comparisons()
    for night in ("2026-09-11", "2026-09-19"):
        page = Page(R.night_page(demo_archive_path, night))
        rows = page.body_rows("comparisons")
        got = sorted((a["data-star"], a["data-band"], a["data-status"]) for a, _ in rows)
        want = comps[comps["night"] == night]
        assert got == sorted(zip(want["star"], want["band"], want["status"]))
        for attrs, cells in rows:  # the visible cells say the same
            assert cells[0] == attrs["data-star"] and cells[1] == attrs["data-band"]
            assert cells[2] == R.STATUS_WORDS[attrs["data-status"]]
            assert cells[2].startswith("rejected") == (attrs["data-status"] != "kept")
        # C4 varies in the demo field (its truth), and the page gives the ensemble's reason in words
        c4 = [cells for a, cells in rows if a["data-star"] == "C4"]
        assert c4 and all(c[2] == "rejected: it varies" and "scatter about the ensemble" in c[3] for c in c4)


def test_the_check_star_table_is_the_report_s(demo_archive_path):
    rep = varstar.open_archive(demo_archive_path).night_report("2026-09-12")
    rows = Page(R.night_page(demo_archive_path, "2026-09-12")).body_rows("checks")
    assert len(rows) == sum(len(b["check_stars"]) for b in rep["bands"].values())
    for _, cells in rows:
        c = rep["bands"][cells[1]]["check_stars"][cells[0]]
        assert float(cells[4]) == pytest.approx(c["rms"], abs=5e-5)
        assert float(cells[5]) == pytest.approx(c["predicted_rms"], abs=5e-5)
        assert float(cells[6]) == pytest.approx(c["rms"] / c["predicted_rms"], abs=0.005)


def test_comparison_residuals_calibrate_like_the_archive(demo_archive_path):
    # the check star goes through the same step as the comparison stars here; the archive stores its
    # calibrated light curve, so the two must agree up to the star's mean (the archive is the reference)
    arch = varstar.open_archive(demo_archive_path)
    night = "2026-09-19"
    exp = arch.exposures()
    exp = exp[exp["night"] == night]
    raw = arch.raw()
    raw = raw[raw["night"] == int(exp["night_number"].iloc[0])]
    res = R.comparison_residuals(raw, exp, ["K1"])
    for band in ("B", "V"):
        mine = res[(res["band"] == band) & ~res["flagged"]].sort_values("bjd_tdb")
        lc = arch.lightcurve(band=band, star="K1")
        lc = lc[lc["night"] == night].sort_values("bjd_tdb")
        assert len(mine) == len(lc) > 50
        np.testing.assert_allclose(mine["bjd_tdb"], lc["bjd_tdb"], rtol=0, atol=1e-9)
        np.testing.assert_allclose(mine["dmag"], lc["mag"] - lc["mag"].mean(), rtol=0, atol=1e-9)
    # flagged points are kept apart, not dropped: the night lost exposures to a cloud, and the archive's
    # flagged K1 points with a magnitude are the ones marked here
    every = arch.lightcurve(star="K1", include_flagged=True)
    every = every[(every["night"] == night) & (every["quality"] != 0) & np.isfinite(every["mag"])]
    assert int(res["flagged"].sum()) == len(every) > 30


def test_zero_point_figure_draws_every_exposure_and_the_airmass(demo_archive_path):
    exp = varstar.open_archive(demo_archive_path).exposures()
    exp = exp[exp["night"] == "2026-09-19"]
    fig = R.zero_point_figure(exp)
    main = [ax for ax in fig.axes if ax.get_ylabel().endswith("zero point (mag)")]
    assert [ax.get_ylabel() for ax in main] == ["B zero point (mag)", "V zero point (mag)"]
    for ax, band in zip(main, ("B", "V")):
        d = exp[exp["band"] == band]
        flagged = d["flags"].astype(str) != ""
        lines = {ln.get_label(): ln for ln in ax.get_lines()}
        assert len(lines["flagged exposure"].get_xdata()) == int(flagged.sum()) > 0
        good = [c for c in ax.containers if c.get_label() == f"{band} zero point"]
        np.testing.assert_allclose(np.sort(good[0].lines[0].get_ydata()), np.sort(d["zero_point"][~flagged]))
    twins = [ax for ax in fig.axes if ax.get_ylabel() == "airmass"]
    assert len(twins) == 2
    np.testing.assert_allclose(np.sort(twins[0].get_lines()[0].get_ydata()), np.sort(exp[exp["band"] == "B"]["airmass"]))


# --------------------------------------------------------------------------- figures, links, escaping


def _pages(demo_archive_path, full_archive) -> dict[str, str]:
    return {
        "demo night": R.night_page(demo_archive_path, "2026-09-19"),
        "full night": R.night_page(full_archive, "2026-09-19"),
        "demo archive": R.archive_page(demo_archive_path),
        "full archive": R.archive_page(full_archive),
    }


@pytest.fixture(scope="module")
def pages(demo_archive_path, full_archive) -> dict[str, str]:
    return _pages(demo_archive_path, full_archive)


def test_every_figure_is_an_embedded_png_with_alt_text(pages):
    least = {"demo night": 3, "full night": 4, "demo archive": 2, "full archive": 4}  # + colour, + phased and O - C
    for name, text in pages.items():
        page = Page(text)
        imgs = [a for t, a in page.tags if t == "img"]
        assert len(imgs) >= least[name], name
        for a in imgs:
            assert a["src"].startswith("data:image/png;base64,"), name
            assert base64.b64decode(a["src"].split(",", 1)[1])[:8] == PNG_SIGNATURE
            assert len(a.get("alt", "").strip()) > 20, (name, a.get("alt"))
        assert not any(t == "svg" for t, _ in page.tags)  # no figure without an img's alt


def test_nothing_is_fetched_from_anywhere(pages):
    for name, text in pages.items():
        page = Page(text)
        assert not any(t in ("script", "link", "iframe", "object", "embed", "base") for t, _ in page.tags), name
        for tag, attrs in page.tags:
            for key in ("src", "href", "srcset", "poster", "action", "data"):
                v = attrs.get(key)
                if v is None:
                    continue
                low = v.strip().lower()
                assert not low.startswith(("http:", "https:", "//", "ftp:", "file:")), (name, tag, key, v[:80])
                assert low.startswith(("data:image/png;base64,", "#")), (name, tag, key, v[:80])
        assert "url(" not in text.lower() and "@import" not in text.lower(), name
        metas = [a for t, a in page.tags if t == "meta"]
        assert any(a.get("name") == "viewport" and "width=device-width" in a.get("content", "") for a in metas)
        assert any(a.get("charset", "").lower() == "utf-8" for a in metas)


def test_the_archive_page_links_every_night_to_its_section(demo_archive_path, pages):
    page = Page(pages["demo archive"])
    hrefs = [a["href"] for t, a in page.tags if t == "a" and "href" in a]
    for night in _nights(demo_archive_path):
        assert f"#night-{night}" in hrefs
        assert f"night-{night}" in page.ids
        assert night in page.text_of[f"night-{night}"]
    assert all(h[1:] in page.ids for h in hrefs if h.startswith("#"))
    rows = page.body_rows("nights")
    assert [cells[0] for _, cells in rows] == _nights(demo_archive_path)
    arch = varstar.open_archive(demo_archive_path)
    for _, cells in rows:
        assert cells[3] == R.night_verdict(arch.night_report(cells[0])).verdict


def test_the_night_page_shows_the_description_and_software(demo_archive_path, pages):
    text = pages["demo night"]
    arch = varstar.open_archive(demo_archive_path)
    assert "<details><summary>Target description in force</summary><pre>" in text
    assert "Wren-Hollow 7" in text and "role = &quot;comparison&quot;" in text
    assert str(arch.nights()["software"].iloc[0]) in text


def _hostile_archive(demo_data, folder: Path, name: str) -> Path:
    toml = (demo_data.folder / "target.toml").read_text(encoding="utf-8")
    toml = re.sub(r'(?m)^name = ".*"$', f"name = {json.dumps(name)}", toml, count=1)
    toml = toml.split("[ephemeris]")[0]  # and no ephemeris: the archive page says there is no prediction
    toml = toml.replace("# Wren-Hollow", '# <img src="https://example.invalid/x.png"> Wren-Hollow', 1)
    path = folder / "hostile.h5"
    varstar.create_archive(path, varstar.target.parse_target(toml))
    varstar.ingest(path, [demo_data.nights[0]])
    return path


def test_user_text_is_escaped(demo_data, tmp_path):
    hostile = "<script>alert(1)</script>"
    path = _hostile_archive(demo_data, tmp_path, hostile)
    assert varstar.open_archive(path).target.name == hostile
    night = _nights(path)[0]
    for text in (R.night_page(path, night), R.archive_page(path)):
        assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
        assert "<script" not in text.lower()
        assert '<img src="https:' not in text and "&lt;img src=&quot;https://example.invalid" in text
        page = Page(text)
        assert not any(t == "script" for t, _ in page.tags)
        title = re.search(r"<title>(.*?)</title>", text).group(1)
        assert "&lt;script&gt;" in title
        for _, a in page.tags:  # alt texts carry the name as text, never as markup
            assert "<script>" not in a.get("alt", "").replace(hostile, "")
    assert "no prediction" in R.archive_page(path)


# --------------------------------------------------------------------------- the archive page's analyses


def test_period_section_shows_the_stored_analysis(full_archive, pages):
    arch = varstar.open_archive(full_archive)
    hist = arch.periods()
    res = json.loads(hist.iloc[-1]["result"])
    page = Page(pages["full archive"])
    assert len(page.body_rows("periods")) == len(hist)
    peaks = page.body_rows("peaks")
    assert [float(c[0]) for _, c in peaks] == pytest.approx([p["period"] for p in res["aliases"]], abs=1e-6)
    assert f"{res['period']:.7f}" in pages["full archive"]
    # the phased model drawn is the stored fit: its residuals have the rms the fit stored
    lc = arch.lightcurve(columns=["bjd_tdb", "mag", "band"])
    for band, fit in res["fits"].items():
        d = lc[lc["band"] == band]
        resid = d["mag"].to_numpy() - R.harmonic_model(fit, d["bjd_tdb"].to_numpy())
        assert len(d) == fit["n_points"]
        assert float(np.sqrt(np.mean(resid**2))) == pytest.approx(fit["rms"], rel=0.15)
        assert abs(float(np.mean(resid))) < 3 * fit["rms"] / math.sqrt(len(d)) + 0.003


def test_timings_and_predictions_are_the_archive_s(full_archive, pages):
    arch = varstar.open_archive(full_archive)
    tim = arch.timings()
    page = Page(pages["full archive"])
    rows = page.body_rows("timings")
    assert len(rows) == len(tim) > 0
    for (_, cells), r in zip(rows, tim.itertuples()):
        assert float(cells[7]) == pytest.approx(r.o_minus_c * 1440.0, abs=0.006)  # O − C in minutes
    assert len(page.body_rows("ephemerides")) == len(arch.ephemerides())
    last = float(np.nanmax(arch.exposures()["jd_utc"]))
    pred = arch.predict(R.utc_iso_of_jd(last) + "Z", R.utc_iso_of_jd(last + R.PREDICT_DAYS) + "Z").to_dict()["events"]
    got = page.body_rows("predictions")
    assert [c[0] for _, c in got] == [e["utc"] for e in pred] and len(pred) >= 7 / 0.47 - 1
    # the demo archive without analyses still predicts from its target's [ephemeris]
    assert len(Page(pages["demo archive"]).body_rows("predictions")) == len(pred)
    assert "No period analysis is stored yet" in pages["demo archive"]


def test_write_page_writes_the_text(tmp_path, pages):
    out = tmp_path / "night.html"
    R.write_page(pages["demo night"], out)
    assert out.read_bytes() == pages["demo night"].encode("utf-8")


# --------------------------------------------------------------------------- size


def test_a_night_of_2000_exposures_stays_under_3_mb(tmp_path):
    from varstar.simulate import measurements_csv, synthetic_night

    toml_text, df = synthetic_night(2000, 12, seed=0)
    csv = tmp_path / "night.csv"
    csv.write_text(measurements_csv(df), encoding="utf-8")
    path = tmp_path / "big.h5"
    varstar.create_archive(path, varstar.target.parse_target(toml_text))
    varstar.ingest(path, [csv])
    night = _nights(path)[0]
    rep = varstar.open_archive(path).night_report(night)
    assert rep["n_exposures"] >= 2000
    t = time.perf_counter()
    text = R.night_page(path, night)
    took = time.perf_counter() - t
    size = len(text.encode("utf-8"))
    assert size < 3_000_000, f"{size:,} bytes"
    assert Page(text).text_of["verdict"].strip().endswith(".")
    print(f"2,000-exposure night page: {size:,} bytes in {took:.1f} s")
