"""A fleet of invented targets on a real Dask cluster: the same results as one archive at a time,
files routed or reported, failures kept to their target, a killed worker harmless, the summary.

Compared against the serial path (``varstar.ingest`` and ``Archive.period`` per archive, in this
process): the fleet must only schedule that work, never change it.
"""

from __future__ import annotations

import json
import shutil

import pandas as pd
import pytest
from fleet_data import TARGETS, invented_target
from helpers import one_json, run

import varstar
from varstar.errors import InputError
from varstar.fleet import fleet_summary, ingest_fleet, init_fleet, open_fleet, route, update_fleet
from varstar.fleet.results import FleetError


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """Four invented targets, two nights each; the first measures stars with ids of its own and its second
    night's file has no target name (routed by its stars); plus a file for no target and one for several."""
    root = tmp_path_factory.mktemp("fleet")
    inbox = root / "inbox"
    inbox.mkdir()
    targets = [invented_target(inbox, 0, star_prefix="WH-")]
    targets += [invented_target(inbox, k) for k in range(1, 4)]
    unnamed = inbox / "night-of-0917.csv"
    targets[0].nights[1].rename(unnamed)
    targets[0] = type(targets[0])(targets[0].name, targets[0].toml, (targets[0].nights[0], unnamed))
    for t in targets:  # the descriptions live outside the inbox
        t.toml.rename(root / t.toml.name)
    tomls = [root / t.toml.name for t in targets]
    stranger = inbox / "mystery.csv"
    stranger.write_text("jd,band,star,mag,mag_err\n2461301.8,V,ZZ9,12.1,0.01\n", encoding="utf-8")
    shared = inbox / "shared.csv"  # ids V1, C1... are stars of targets 1 to 3 alike
    shared.write_bytes(targets[1].nights[0].read_bytes())
    return root, inbox, tomls, targets, stranger, shared


@pytest.fixture(scope="module")
def fleet_run(made, cluster):
    """The fleet made, ingested (local engine of 2 processes) and updated (the shared cluster)."""
    root, inbox, tomls, targets, stranger, shared = made
    init = init_fleet(root / "fleet", tomls)
    ingested = ingest_fleet(root / "fleet", [inbox], workers=2)
    updated = update_fleet(root / "fleet", period=True, timings=True, scheduler=cluster[0])
    return init, ingested, updated


@pytest.fixture(scope="module")
def serial(made, tmp_path_factory):
    """The same archives, one at a time in this process: the reference."""
    root, inbox, tomls, targets, *_ = made
    folder = tmp_path_factory.mktemp("serial")
    paths = []
    for toml, t in zip(tomls, targets):
        path = folder / f"{t.name}.h5"
        varstar.create_archive(path, varstar.read_target(toml))
        varstar.ingest(path, sorted(t.nights))
        arch = varstar.open_archive(path)
        arch.period()
        arch.time_extrema()
        paths.append(path)
    return paths


@pytest.mark.slow
def test_the_fleet_gives_what_one_archive_at_a_time_gives(made, fleet_run, serial):
    init, ingested, updated = fleet_run
    names = [t.name for t in made[3]]
    assert [c["target"] for c in init.created] == names
    assert [o.target for o in ingested.targets] == names and ingested.n_failed == 0
    assert all(len(o.nights_added) == 2 for o in ingested.targets)
    assert updated.n_failed == 0 and all(o.period for o in updated.targets)
    fleet = open_fleet(made[0] / "fleet")
    for entry, ref in zip(fleet.entries, serial):
        mine, theirs = varstar.open_archive(entry.archive), varstar.open_archive(ref)
        pd.testing.assert_frame_equal(mine.lightcurve(include_flagged=True), theirs.lightcurve(include_flagged=True))
        cols = ["period", "period_err", "epoch", "amplitude", "nights", "n_points"]
        pd.testing.assert_frame_equal(mine.periods()[cols], theirs.periods()[cols])
        cols = ["night", "band", "type", "bjd_tdb", "err", "cycle", "o_minus_c"]
        pd.testing.assert_frame_equal(mine.timings()[cols], theirs.timings()[cols])
        assert varstar.verify(entry.archive).ok


@pytest.mark.slow
def test_files_for_no_target_or_several_are_reported_never_guessed(made, fleet_run):
    root, inbox, tomls, targets, stranger, shared = made
    _init, ingested, _ = fleet_run
    assert [u["file"] for u in ingested.unmatched] == [str(stranger)]
    assert "ZZ9" in ingested.unmatched[0]["why"]
    assert [a["file"] for a in ingested.ambiguous] == [str(shared)]
    assert sorted(ingested.ambiguous[0]["targets"]) == sorted(t.name for t in targets[1:])
    # the file without a target name went to its target by its stars
    assignments, unmatched, ambiguous = route(root / "fleet", [inbox])
    first = open_fleet(root / "fleet").entries[0].archive
    assert inbox / "night-of-0917.csv" in assignments[first]
    table = open_fleet(root / "fleet").route([inbox])
    assert table.set_index("file").loc[str(inbox / "night-of-0917.csv"), "rule"] == "stars"
    assert set(table["status"]) == {"matched", "unmatched", "ambiguous"}


def test_name_rule_needs_a_separator_after_the_stem():
    from varstar.fleet.routing import name_matches

    assert name_matches("wren-hollow-7_2026-09-11.csv", "Wren_Hollow_7")
    assert name_matches("Wren Hollow 7.csv", "Wren_Hollow_7")
    assert not name_matches("wren-hollow-70_2026-09-11.csv", "Wren_Hollow_7")
    assert not name_matches("hollow-7.csv", "Wren_Hollow_7")


@pytest.mark.slow
def test_rerunning_changes_nothing(made, fleet_run, cluster):
    root, inbox, *_ = made
    again = ingest_fleet(root / "fleet", [inbox], scheduler=cluster[0])
    assert {o.status for o in again.targets} == {"unchanged"} and again.n_failed == 0
    assert all(len(o.skipped) == 2 for o in again.targets)
    table = open_fleet(root / "fleet").update(period=True, timings=True, scheduler=cluster[0])
    assert set(table["status"]) == {"unchanged"}
    assert all(len(varstar.open_archive(e.archive).periods()) == 1 for e in open_fleet(root / "fleet").entries)


@pytest.mark.slow
def test_lightcurves_are_one_dask_frame_with_one_partition_per_archive(made, fleet_run):
    import dask.dataframe as dd

    fleet = open_fleet(made[0] / "fleet")
    lc = fleet.lightcurves()
    assert isinstance(lc, dd.DataFrame) and lc.npartitions == len(fleet.entries)
    expected = []
    for e in fleet.entries:
        one = varstar.open_archive(e.archive).lightcurve()
        one.insert(0, "target", e.name)
        expected.append(one)
    pd.testing.assert_frame_equal(lc.compute().reset_index(drop=True), pd.concat(expected, ignore_index=True))
    v = fleet.lightcurves(band="V", columns=["bjd_tdb", "mag"]).compute()
    assert list(v.columns) == ["target", "bjd_tdb", "mag"] and len(v) == (lc["band"] == "V").sum().compute()


@pytest.mark.slow
def test_summary_after_a_clean_run(made, fleet_run):
    table = fleet_summary(made[0] / "fleet")
    from varstar.fleet.summary import SUMMARY_COLUMNS

    assert list(table.columns) == list(SUMMARY_COLUMNS)
    assert list(table["target"]) == [t[0] for t in TARGETS]
    assert (table["n_nights"] == 2).all() and (table["last_night"] == "2026-09-17").all()
    assert table["period"].notna().all() and table["period_change_sigma"].isna().all()  # one analysis each
    assert (table["check_rms_ratio"] > 0).all() and (table["attention"] == "").all()


@pytest.mark.slow
def test_a_failing_target_does_not_stop_the_others_and_the_exit_status_counts_it(tmp_path, cluster, capsys):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    targets = [invented_target(inbox, k, n_nights=1) for k in range(3)]
    bad = targets[1].nights[0]
    lines = bad.read_text(encoding="utf-8").splitlines()
    cells = lines[5].split(",")
    cells[3] = "not-a-number"  # the mag column
    lines[5] = ",".join(cells)
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")
    rc, out, err = run(capsys, "fleet", "init", tmp_path / "fleet", *[t.toml for t in targets], "--json")
    assert rc == 0, err
    rc, out, err = run(capsys, "fleet", "ingest", tmp_path / "fleet", inbox, "--scheduler", cluster[0], "--json")
    obj = one_json(out)
    assert rc == obj["exit_code"] == FleetError.exit_code == 4
    assert "1 of 3 targets failed" in obj["error"] and obj["n_failed"] == 1
    status = {t["target"]: t["status"] for t in obj["targets"]}
    assert status == {targets[0].name: "done", targets[1].name: "failed", targets[2].name: "done"}
    failed = next(t for t in obj["targets"] if t["status"] == "failed")
    assert failed["error_kind"] == "InputError" and bad.name in failed["error"]
    kept = json.loads((tmp_path / "fleet" / "fleet-ingest-failures.json").read_text(encoding="utf-8"))
    assert [f["target"] for f in kept["failures"]] == [targets[1].name]
    summary = fleet_summary(tmp_path / "fleet").set_index("target")
    assert "last ingest failed (InputError)" in summary.loc[targets[1].name, "attention"]
    assert summary.loc[targets[0].name, "attention"] == ""
    # text form: the failure named on stdout, the count on stderr
    rc, out, err = run(capsys, "fleet", "ingest", tmp_path / "fleet", inbox, "--scheduler", cluster[0])
    assert rc == 4 and "FAILED Tarn Vale 12" in out and err.startswith("error: 1 of 3 targets failed")


@pytest.mark.slow
def test_a_killed_worker_leaves_its_archive_whole_and_a_rerun_completes_it(tmp_path, cluster):
    address, client = cluster
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    targets = [invented_target(inbox, k, n_nights=1) for k in range(3)]
    init_fleet(tmp_path / "fleet", [t.toml for t in targets])
    fleet = open_fleet(tmp_path / "fleet")
    victim = fleet.entries[1].archive
    marker = tmp_path / "kill-once"
    marker.write_text("")

    def kill_on_append(marker: str, victim: str) -> None:
        """In every worker: the first append to ``victim`` (while ``marker`` exists) kills the process."""
        import os

        from varstar.archive import writes

        original = writes.ArchiveWriter.append_night

        def append_night(self, *args, **kwargs):
            if str(self.path).endswith(victim) and os.path.exists(marker):
                os.unlink(marker)
                os._exit(1)  # mid-change: the worker dies holding the archive's writer lock
            return original(self, *args, **kwargs)

        writes.ArchiveWriter.append_night = append_night

    client.run(kill_on_append, str(marker), victim.name)  # a local function: sent by value
    first = ingest_fleet(fleet, [inbox], scheduler=address)
    by = {o.target: o for o in first.targets}
    assert by[targets[1].name].status == "failed" and by[targets[1].name].error_kind == "KilledWorker"
    assert "run the command again" in by[targets[1].name].error
    assert by[targets[0].name].status == by[targets[2].name].status == "done"
    assert varstar.verify(victim).ok and varstar.open_archive(victim).nights().empty  # the state before
    client.wait_for_workers(2, timeout=60)
    second = ingest_fleet(fleet, [inbox], scheduler=address)
    by = {o.target: o for o in second.targets}
    assert by[targets[1].name].status == "done" and by[targets[1].name].nights_added == ("2026-09-16",)
    assert by[targets[0].name].status == by[targets[2].name].status == "unchanged"
    assert varstar.verify(victim).ok and len(varstar.open_archive(victim).nights()) == 1


@pytest.mark.slow
def test_summary_names_a_comparison_star_that_began_to_vary(tmp_path, cluster):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    t = invented_target(inbox, 2, n_nights=2, vary_star="C3")
    init_fleet(tmp_path / "fleet", [t.toml])
    assert ingest_fleet(tmp_path / "fleet", [inbox], scheduler=cluster[0]).n_failed == 0
    row = fleet_summary(tmp_path / "fleet").iloc[0]
    assert "C3 (" in row["comparisons_rejected"]
    assert "comparison star C3" in row["attention"] and "began to vary" in row["attention"]


def test_summary_pieces_on_constructed_histories():
    from varstar.fleet.summary import check_stars, o_minus_c_trend, period_change

    periods = pd.DataFrame({"star": ["V1", "V1", "V1"], "bands": ["B,V", "V", "B,V"],
                            "period": [0.5000, 0.4, 0.5010], "period_err": [0.0002, 0.1, 0.0002]})
    p, e, change = period_change(periods, "V1")
    assert (p, e) == (0.5010, 0.0002)
    assert change == pytest.approx(0.0010 / (0.0002 * 2 ** 0.5))  # against the earlier B,V analysis, 3.5 sigma
    assert period_change(periods.iloc[:1], "V1")[2] != period_change(periods.iloc[:1], "V1")[2]  # NaN: no previous
    timings = pd.DataFrame({"bjd_tdb": [1.0, 2.0, 3.0], "cycle": [0.0, 10.0, 20.0], "o_minus_c": [0.0, 0.001, 0.002],
                            "err": [0.001, 0.001, 0.001], "ephemeris": [0, 0, 0]})
    latest, slope, slope_err, n = o_minus_c_trend(timings)
    assert latest == 0.002 and slope == pytest.approx(1e-4) and n == 3
    assert slope_err == pytest.approx(0.001 / (200.0 ** 0.5))  # sqrt(1 / sum w (x - mean x)^2)
    report = {"bands": {"V": {"check_stars": {"K1": {"rms": 0.03, "predicted_rms": 0.01}}},
                        "B": {"check_stars": {"K1": {"rms": 0.01, "predicted_rms": 0.01}}}}}
    assert check_stars(report) == (pytest.approx(3.0), "K1 (V)")


def test_init_refuses_clashing_names_and_leaves_nothing(tmp_path):
    a = invented_target(tmp_path, 0, n_nights=1)
    other = tmp_path / "other.toml"
    other.write_text(a.toml.read_text(encoding="utf-8").replace('name = "Wren Hollow 7"', 'name = "Wren/Hollow 7"'),
                     encoding="utf-8")
    with pytest.raises(InputError, match="Wren_Hollow_7.h5"):
        init_fleet(tmp_path / "fleet", [a.toml, other])
    assert not (tmp_path / "fleet").exists()
    init_fleet(tmp_path / "fleet", [a.toml])
    before = sorted(p.name for p in (tmp_path / "fleet").iterdir())
    with pytest.raises(InputError, match="already in the fleet"):
        init_fleet(tmp_path / "fleet", [other])
    assert sorted(p.name for p in (tmp_path / "fleet").iterdir()) == before
    bad = tmp_path / "bad.toml"
    bad.write_text("[target]\nname = 3\n", encoding="utf-8")
    b = invented_target(tmp_path, 1, n_nights=1)
    with pytest.raises(InputError, match="bad.toml"):
        init_fleet(tmp_path / "fleet", [b.toml, bad])
    assert sorted(p.name for p in (tmp_path / "fleet").iterdir()) == before


def test_a_fleet_file_fault_is_named(tmp_path):
    a = invented_target(tmp_path, 0, n_nights=1)
    init_fleet(tmp_path / "fleet", [a.toml])
    path = tmp_path / "fleet" / "fleet.toml"
    text = path.read_text(encoding="utf-8")
    path.write_text(text.replace("wait = 30.0", "wait = 30.0\nworkes = 2"), encoding="utf-8")
    with pytest.raises(InputError, match="workes"):
        open_fleet(tmp_path / "fleet")
    path.write_text(text.replace('archive = "Wren_Hollow_7.h5"', 'archive = "../x.h5"'), encoding="utf-8")
    with pytest.raises(InputError, match="not a plain file name"):
        open_fleet(tmp_path / "fleet")


def test_workers_that_cannot_see_the_fleet_are_refused(tmp_path, cluster, monkeypatch):
    from varstar.fleet import engine

    a = invented_target(tmp_path, 0, n_nights=1)
    init_fleet(tmp_path / "fleet", [a.toml])
    # as a worker on another machine without the shared file system would answer
    monkeypatch.setattr(engine, "missing_on_workers", lambda client, paths: {"tcp://w:1": [paths[0]], "tcp://w:2": []})
    with pytest.raises(InputError, match="cannot see the fleet"):
        ingest_fleet(tmp_path / "fleet", list(a.nights), scheduler=cluster[0])
    assert varstar.open_archive(tmp_path / "fleet" / "Wren_Hollow_7.h5").nights().empty


def test_cli_help_of_every_fleet_sub_command_states_defaults():
    import argparse

    from varstar.cli import build_parser

    top = build_parser()
    fleet = next(a for a in top._actions if isinstance(a, argparse._SubParsersAction)).choices["fleet"]
    subs = next(a for a in fleet._actions if isinstance(a, argparse._SubParsersAction)).choices
    assert set(subs) == {"init", "ingest", "update", "summary"}
    for name, sp in subs.items():
        for a in sp._actions:
            if isinstance(a, argparse._HelpAction):
                continue
            assert a.help, (name, a.dest)
            if a.option_strings and a.dest != "json" and a.nargs != 0:
                assert "default" in a.help, (name, a.dest)


@pytest.mark.slow
def test_cli_summary_writes_csv_and_one_json_object(made, fleet_run, capsys, tmp_path):
    rc, out, err = run(capsys, "fleet", "summary", made[0] / "fleet", "-o", tmp_path / "fleet.csv", "--json")
    assert rc == 0, err
    obj = one_json(out)
    assert len(obj["targets"]) == 4 and obj["n_attention"] == 0 and obj["csv"] == str(tmp_path / "fleet.csv")
    csv = pd.read_csv(tmp_path / "fleet.csv")
    assert list(csv["target"]) == [t[0] for t in TARGETS]
    shutil.rmtree(tmp_path)


def test_progress_only_on_a_terminal_and_never_with_json(monkeypatch):
    import argparse
    import io

    from varstar.fleet.commands import _progress
    from varstar.fleet.results import TargetOutcome

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    monkeypatch.setattr("sys.stderr", io.StringIO())
    assert _progress(argparse.Namespace(json=False), "ingest") is None  # not a terminal
    term = Terminal()
    monkeypatch.setattr("sys.stderr", term)
    assert _progress(argparse.Namespace(json=True), "ingest") is None
    show = _progress(argparse.Namespace(json=False), "ingest")
    show(1, 2, TargetOutcome("A", "a.h5", "failed", error="locked"))
    show(2, 2, TargetOutcome("B", "b.h5", "done"))
    text = term.getvalue()
    assert "failed: A: locked\n" in text and "ingest: 1/2 targets done" in text and text.endswith("2/2 targets done\n")


def test_an_unreachable_scheduler_is_refused_in_words(tmp_path, monkeypatch):
    from varstar.fleet import engine

    a = invented_target(tmp_path, 0, n_nights=1)
    init_fleet(tmp_path / "fleet", [a.toml])
    monkeypatch.setattr(engine, "CONNECT_TIMEOUT_S", 1.0)
    monkeypatch.setenv("DASK_SCHEDULER_ADDRESS", "tcp://127.0.0.1:9")  # the environment names the cluster
    with pytest.raises(InputError, match="cannot reach the Dask scheduler at tcp://127.0.0.1:9"):
        ingest_fleet(tmp_path / "fleet", list(a.nights))
    assert varstar.open_archive(tmp_path / "fleet" / "Wren_Hollow_7.h5").nights().empty
