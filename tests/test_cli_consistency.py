"""The command line is consistent across commands: errors in JSON, one exit code per kind of
outcome, one option name per concept, help that states defaults, grammatical text, and a
reason for every removal asked for in a terminal."""

from __future__ import annotations

import argparse
import hashlib
import re
import shutil

import pytest
from helpers import REPO, one_json, run

from varstar import errors, text
from varstar.cli import EXIT_CODES, build_parser, main


@pytest.fixture()
def archive_copy(demo_archive_path, tmp_path):
    path = tmp_path / "demo.h5"
    shutil.copyfile(demo_archive_path, path)
    return path


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _nights(path) -> list[str]:
    import varstar

    return [str(n) for n in varstar.open_archive(path).nights()["night"]]


# -- 1. errors as one JSON object with --json ----------------------------------------------------
def test_json_error_object_carries_the_message_and_the_exit_code(capsys, monkeypatch, archive_copy, tmp_path):
    rc, out, err = run(capsys, "plot", archive_copy, "-o", tmp_path / "lc.png", "--night", "2001-01-01", "--json")
    obj = one_json(out)
    assert rc == errors.ArchiveError.exit_code == obj["exit_code"]
    assert err.count("\n") == 1 and err == f"error: {obj['error']}\n" and "2001-01-01" in obj["error"]
    assert set(obj) == {"error", "exit_code"}
    # the same without --json: text only, stdout empty
    rc2, out2, err2 = run(capsys, "plot", archive_copy, "-o", tmp_path / "lc.png", "--night", "2001-01-01")
    assert (rc2, out2, err2) == (rc, "", err)


def test_json_error_object_for_a_usage_mistake(capsys, monkeypatch, archive_copy):
    capsys.readouterr()
    with pytest.raises(SystemExit) as stop:
        main(["plot", str(archive_copy), "--no-such-option", "--json"])
    out, err = capsys.readouterr()
    obj = one_json(out)
    assert stop.value.code == obj["exit_code"] == EXIT_CODES["usage"] == 2
    assert "--no-such-option" in obj["error"] and "--no-such-option" in err


def test_json_error_object_keeps_the_failed_verify_report(capsys, monkeypatch, archive_copy):
    import h5py

    with h5py.File(archive_copy, "r+") as f:  # change one stored magnitude behind the archive's back
        mags = f["points"]["mag"]
        mags[0] = mags[0] + 1.0
    rc, out, err = run(capsys, "verify", archive_copy, "--json")
    obj = one_json(out)
    assert rc == obj["exit_code"] == errors.ArchiveError.exit_code
    assert obj["ok"] is False and obj["problems"] and "verification failed" in obj["error"]
    assert err.startswith("error: ") and err.count("\n") == 1


# -- 2. exit codes -----------------------------------------------------------------------------
def test_exit_codes_table_matches_the_error_classes_and_the_readme():
    for name in ("InputError", "ArchiveError", "ReductionError", "OutputError"):
        assert EXIT_CODES[name] == getattr(errors, name).exit_code, name
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Exit codes", 1)[1].split("\n## ", 1)[0]
    assert readme.index("## Exit codes") < readme.index("## Changes")
    documented = {int(m) for m in re.findall(r"^\| (\d+) \|", section, re.M)}
    assert documented == set(EXIT_CODES.values())
    for name in ("InputError", "ArchiveError", "ReductionError", "OutputError"):
        row = next(ln for ln in section.splitlines() if f"`{name}`" in ln)
        assert row.startswith(f"| {EXIT_CODES[name]} |"), row


def test_no_such_night_gives_the_same_code_in_plot_colour_and_report(capsys, archive_copy, tmp_path):
    codes = {}
    for argv in (["plot", archive_copy, "-o", tmp_path / "lc.png", "--night", "2001-01-01"],
                 ["colour", archive_copy, "--night", "2001-01-01"],
                 ["report", archive_copy, "2001-01-01"]):
        rc, out, err = run(capsys, *argv)
        assert out == "" and "2001-01-01" in err and err.startswith("error: "), err
        codes[argv[0]] = rc
    assert set(codes.values()) == {errors.ArchiveError.exit_code}, codes


# -- 3. --include-flagged ----------------------------------------------------------------------
def test_plot_takes_include_flagged_and_keeps_show_flagged(capsys, archive_copy, tmp_path):
    counts = {}
    for extra in ([], ["--include-flagged"], ["--show-flagged"]):
        rc, out, err = run(capsys, "plot", archive_copy, "-o", tmp_path / "lc.png", *extra, "--json")
        assert rc == 0, err
        counts[tuple(extra)] = one_json(out)["n_points"]
    assert counts[("--include-flagged",)] == counts[("--show-flagged",)] > counts[()]
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    assert "| `varstar plot` | `--include-flagged`" in readme and "`--show-flagged` |" in readme


# -- 4. help -----------------------------------------------------------------------------------
def _subparsers() -> dict[str, argparse.ArgumentParser]:
    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    return dict(sub.choices)


def test_every_argument_has_help_and_every_option_states_its_default():
    missing = []
    for name, sp in _subparsers().items():
        for a in sp._actions:
            if isinstance(a, (argparse._HelpAction, argparse._VersionAction)) or a.dest == "json":
                continue
            if not a.help:
                missing.append(f"{name} {a.dest}: no help")
            elif a.option_strings and not a.required and a.nargs != 0 and "default" not in a.help:
                missing.append(f"{name} {a.option_strings[0]}: no default in {a.help!r}")
    assert not missing, "\n".join(missing)


def test_help_of_every_command_prints_and_ingest_names_the_time_system(capsys):
    for name in _subparsers():
        capsys.readouterr()
        with pytest.raises(SystemExit) as stop:
            main([name, "--help"])
        assert stop.value.code == 0
        out = capsys.readouterr().out
        assert out.startswith(f"usage: varstar {name}"), name
        if name == "ingest":
            assert "JD(UTC) at mid-exposure" in " ".join(out.split())


# -- 5. text -----------------------------------------------------------------------------------
def test_plural_and_cycle_numbers():
    assert text.plural(1, "exposure") == "1 exposure"
    assert text.plural(2, "exposure") == "2 exposures"
    assert text.plural(0, "point") == "0 points"
    assert text.plural(1, "minimum") == "1 minimum" and text.plural(3, "minimum") == "3 minima"
    assert text.cycle(3.0) == "3" and text.cycle(3.5) == "3.5" and text.cycle(-12.0) == "-12"
    assert text.cycle(-0.0) == "0" and text.cycle(None) == "n/a"


def test_removal_text_is_grammatical_and_names_the_reason():
    res = {"night": "2026-09-14", "n_exposures": 1, "n_points": 1, "sources": ["a.csv"], "reason": "wrong filter"}
    line = text.format_removal(res)
    assert "(1 exposure, 1 point, from a.csv)" in line and "reason: wrong filter" in line
    line = text.format_removal(res | {"n_exposures": 2, "n_points": 30, "reason": ""})
    assert "(2 exposures, 30 points," in line and "no reason given" in line


def test_predict_text_prints_whole_cycles_as_integers():
    d = {"target": "XX Inv", "ephemeris": {"kind": "minimum"}, "site_visible": False,
         "min_altitude_deg": 30.0, "max_sun_altitude_deg": -12.0,
         "events": [{"utc": "2026-12-01T01:00:00", "bjd_tdb": 2461010.5, "type": "primary", "cycle": 3.0,
                     "target_altitude_deg": 40.0, "sun_altitude_deg": -20.0},
                    {"utc": "2026-12-01T05:00:00", "bjd_tdb": 2461010.7, "type": "secondary", "cycle": 3.5,
                     "target_altitude_deg": 45.0, "sun_altitude_deg": -25.0}]}
    lines = text.format_predict(d).splitlines()
    assert lines[0] == "XX Inv: 2 minima predicted"
    assert lines[2].split()[3] == "3" and lines[3].split()[3] == "3.5"
    assert text.format_predict(d | {"events": d["events"][:1]}).splitlines()[0] == "XX Inv: 1 minimum predicted"


# -- 6. remove-night and its reason ------------------------------------------------------------
class _Terminal:
    def __init__(self, answer: str):
        self.answer = answer

    def isatty(self) -> bool:
        return True

    def readline(self) -> str:
        return self.answer


def test_remove_night_refuses_an_empty_reason(capsys, archive_copy):
    night = _nights(archive_copy)[0]
    before = _digest(archive_copy)
    rc, out, err = run(capsys, "remove-night", archive_copy, night, "--reason", "  ")
    assert rc == errors.InputError.exit_code and out == "" and '--reason "..."' in err
    assert _digest(archive_copy) == before


def test_remove_night_asks_for_the_reason_in_a_terminal(capsys, monkeypatch, archive_copy):
    night = _nights(archive_copy)[0]
    monkeypatch.setattr("sys.stdin", _Terminal("wrong filter in the header\n"))
    rc, out, err = run(capsys, "remove-night", archive_copy, night, "--json")
    assert rc == 0, err
    assert one_json(out)["reason"] == "wrong filter in the header" and f"why remove night {night}?" in err
    assert night not in _nights(archive_copy)


def test_remove_night_without_an_answer_changes_nothing(capsys, monkeypatch, archive_copy):
    night = _nights(archive_copy)[0]
    before = _digest(archive_copy)
    monkeypatch.setattr("sys.stdin", _Terminal(""))  # end of input, or an empty line
    rc, out, err = run(capsys, "remove-night", archive_copy, night)
    assert rc == errors.InputError.exit_code and out == ""
    assert 'give --reason "..."' in err and "nothing removed" in err
    assert _digest(archive_copy) == before


def test_remove_night_text_says_what_it_removed(capsys, archive_copy):
    night = _nights(archive_copy)[0]
    rc, out, err = run(capsys, "remove-night", archive_copy, night, "--reason", "test removal")
    assert rc == 0, err
    assert out.startswith(f"removed night {night} (") and "exposures" in out and "reason: test removal" in out
