"""Progress bars: drawn on a terminal's stderr only, never with --json, never into a pipe or a file."""

from __future__ import annotations

import io
import sys

import pytest

from varstar.progress import progress_bar, wanted

from helpers import DEMO, one_json, run


class _Terminal(io.StringIO):
    def isatty(self) -> bool:  # what a terminal says
        return True


def test_a_bar_only_on_a_terminal_and_never_with_json(monkeypatch):
    monkeypatch.setattr(sys, "stderr", io.StringIO())
    assert not wanted() and not wanted(as_json=True)
    with progress_bar("nights") as cb:
        assert cb is None
    term = _Terminal()
    monkeypatch.setattr(sys, "stderr", term)
    assert wanted() and not wanted(as_json=True)
    with progress_bar("nights", as_json=True) as cb:
        assert cb is None
    with progress_bar("nights", unit="night") as cb:
        for k in range(3):
            cb(k, 3)
        cb(3, 3)
    assert "nights" in term.getvalue() and "3/3" in term.getvalue()


@pytest.mark.parametrize("as_json", [False, True])
def test_ingest_of_several_nights_shows_progress_on_a_terminal_only(capsys, tmp_path, monkeypatch, as_json):
    path = tmp_path / "a.h5"
    rc, _, err = run(capsys, "init", path, DEMO / "target.toml")
    assert rc == 0, err
    term = _Terminal()
    monkeypatch.setattr(sys, "stderr", term)
    argv = ["ingest", path, DEMO / "night-2026-09-11.csv", DEMO / "night-2026-09-12.csv"] + (["--json"] if as_json else [])
    rc, out, _ = run(capsys, *argv)
    assert rc == 0
    if as_json:
        assert len(one_json(out)["nights"]) == 2 and term.getvalue() == ""
    else:
        assert "ingest" in term.getvalue() and "Night 2026-09-12" in out
