"""Nights that cannot be what they claim are refused with the reason, unless accepted explicitly.

Each case is made from a demo night (invented field, fixed seed) by one edit a
file can suffer upstream: times shifted by half a year or by half a day, the
target's rows missing, an airmass column that belongs to something else.  A
measurement of a star below the horizon, or in daylight, is impossible (common
practice); the airmass check compares the file's column with the one computed
for the site, target and time.
"""

from __future__ import annotations

import io

import pandas as pd
import pytest

import varstar
from varstar.errors import InputError


def _edited(demo_data, tmp_path, edit) -> object:
    df = pd.read_csv(demo_data.nights[0])
    df = edit(df)
    path = tmp_path / "night.csv"
    buf = io.StringIO()
    df.to_csv(buf, index=False, float_format="%.6f")
    path.write_text(buf.getvalue())
    return path


def _archive(demo_data, tmp_path):
    path = tmp_path / "a.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    return path


def _shift(days):
    return lambda df: df.assign(jd=df["jd"] + days)


CASES = {
    # half a year later the field is up in daytime only (the demo field culminates near midnight in September)
    "half a year later": (_shift(182.5), ("daylight", "below the horizon")),
    "half a day later": (_shift(0.5), ("daylight", "below the horizon")),
    "no target rows": (lambda df: df[df["star"] != "V1"], ("no measurement of the target V1",)),
    "airmass off by 2.3": (lambda df: df.assign(airmass=df["airmass"] + 2.3), ("airmass differs", "by 2.30")),
}


@pytest.mark.parametrize("case", list(CASES))
def test_an_unusual_night_is_refused_with_its_reason_and_nothing_is_written(demo_data, tmp_path, case):
    edit, words = CASES[case]
    night = _edited(demo_data, tmp_path, edit)
    path = _archive(demo_data, tmp_path)
    before = path.read_bytes()
    with pytest.raises(InputError) as err:
        varstar.ingest(path, [night])
    msg = str(err.value)
    assert any(w in msg for w in words), msg
    assert "--accept-unusual" in msg and "nothing was written" in msg
    assert path.read_bytes() == before
    assert varstar.open_archive(path).nights().empty


@pytest.mark.parametrize("case", ["half a day later", "airmass off by 2.3"])
def test_an_unusual_night_accepted_explicitly_records_why(demo_data, tmp_path, case):
    edit, words = CASES[case]
    night = _edited(demo_data, tmp_path, edit)
    path = _archive(demo_data, tmp_path)
    res = varstar.ingest(path, [night], accept_unusual=True)
    # (times half a day late cross the local-noon boundary between nights: two nights, both unusual)
    assert len(res.nights) >= 1
    for rep in res.nights:
        stored = varstar.open_archive(path).night_report(rep["night"])
        assert any(w in reason for reason in stored["accepted_unusual"] for w in words)


def test_a_plausible_night_has_nothing_unusual(demo_data, tmp_path):
    path = _archive(demo_data, tmp_path)
    res = varstar.ingest(path, [demo_data.nights[0]])
    assert "accepted_unusual" not in res.nights[0]


def test_the_command_line_refuses_and_accepts_with_the_flag(demo_data, tmp_path, capsys):
    from helpers import run

    night = _edited(demo_data, tmp_path, CASES["airmass off by 2.3"][0])
    path = _archive(demo_data, tmp_path)
    rc, out, err = run(capsys, "ingest", path, night)
    assert rc == InputError.exit_code and "airmass differs" in err and "--accept-unusual" in err
    rc, out, err = run(capsys, "ingest", path, night, "--accept-unusual")
    assert rc == 0, err
    assert "accepted although unusual (--accept-unusual): the table's airmass differs" in out
