"""Transformation coefficients say when k2_bv was assumed, and what the assumption moves."""

from __future__ import annotations

from helpers import one_json, run

from varstar.standards import K2_BV_TYPICAL, fit_standard_field, k2_assumption_notes


def test_without_k2_bv_the_output_says_zero_was_assumed(capsys, demo_data):
    files = [demo_data.folder / "standards.csv", demo_data.folder / "standards.toml"]
    rc, out, err = run(capsys, "coefficients", *files)
    assert rc == 0, err
    assert "k2_bv     not given: 0 assumed" in out and "(given" not in out
    rc, out, err = run(capsys, "coefficients", *files, "--json")
    obj = one_json(out)
    assert obj["k2_bv_given"] is False and obj["k2_bv"] == 0.0
    rc, out, err = run(capsys, "coefficients", *files, "--k2-bv", "-0.03")
    assert rc == 0 and "k2_bv     = -0.0300 (given" in out and "not given" not in out


def test_the_assumption_is_flagged_exactly_when_a_coefficient_moves_by_more_than_its_error(demo_data):
    csv, toml = demo_data.folder / "standards.csv", demo_data.folder / "standards.toml"
    fit0 = fit_standard_field([csv], toml, k2_bv=0.0)
    fit_t = fit_standard_field([csv], toml, k2_bv=K2_BV_TYPICAL)
    notes = k2_assumption_notes([csv], toml, fit0)
    for name in ("epsilon_v", "mu_bv"):
        moved = abs(getattr(fit_t, name) - getattr(fit0, name)) > getattr(fit0, f"{name}_err")
        assert moved == any(f" {name} would move by " in n for n in notes), (name, notes)
    # b - v is what k2 corrects, so mu_bv is the coefficient it can move (Hardie 1962: k'' acts on the colour)
    assert fit_t.mu_bv != fit0.mu_bv and fit_t.epsilon_v == fit0.epsilon_v
