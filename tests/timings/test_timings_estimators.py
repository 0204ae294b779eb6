"""Tests of varstar.timings.estimators: the extremum estimators chosen by name.

References used (named again beside each check):

* Simulated data with known truth: an invented symmetric minimum (a Gaussian
  dip, no real star) with white noise, generated with fixed seeds; each
  estimator's time is judged against the true time in units of its own
  quoted error (pulls).
* The method names are the project's own, as stored in the archive's
  ``method`` column (docs/archive-format.md).
"""

from __future__ import annotations

import numpy as np
import pytest

from varstar.errors import InputError
from varstar.timings import Ephemeris, find_timings, kwee_van_woerden, symmetric_fit, template_fit
from varstar.timings.estimators import (
    ESTIMATORS,
    KWEE_VAN_WOERDEN,
    MEAN_CURVE_TEMPLATE,
    SYMMETRIC_POLYNOMIAL,
    estimate,
    estimator,
)

# Invented minimum: 0.5 mag deep Gaussian dip of width 0.02 d on a 12.0 mag star.
BASE, DEPTH, WIDTH, NOISE = 12.0, 0.5, 0.02, 0.005
T_CENTRE = 2460000.5


def dip(x):
    """Magnitudes at time ``x`` (days) from the minimum: the invented mean curve."""
    return BASE + DEPTH * np.exp(-0.5 * (np.asarray(x, dtype=float) / WIDTH) ** 2)


def night(rng, t_min, n=120, half_span=0.08):
    """One invented night around the minimum at ``t_min``: jittered 2-min cadence, white noise."""
    step = 2.0 * half_span / n
    t = T_CENTRE + np.linspace(-half_span, half_span, n) + rng.uniform(-0.3, 0.3, n) * step
    return t, dip(t - t_min) + rng.normal(0.0, NOISE, n), np.full(n, NOISE)


def options(name, rng):
    """The options each estimator needs beyond (t, mag, mag_err)."""
    return {
        KWEE_VAN_WOERDEN: {},
        SYMMETRIC_POLYNOMIAL: {"rng": rng, "n_boot": 60},
        MEAN_CURVE_TEMPLATE: {"template": dip, "t_guess": T_CENTRE, "max_shift": 0.01},
    }[name]


def test_table_names_and_functions():
    # The table names exactly the three methods, each bound to its own function.
    assert dict(ESTIMATORS) == {
        "kwee-van-woerden": kwee_van_woerden,
        "symmetric-polynomial": symmetric_fit,
        "mean-curve template": template_fit,
    }
    assert estimator(KWEE_VAN_WOERDEN) is kwee_van_woerden
    with pytest.raises(TypeError):
        ESTIMATORS["other"] = kwee_van_woerden  # read-only: the table is not changed behind find_timings' back


@pytest.mark.parametrize("name", sorted(ESTIMATORS))
def test_each_estimator_recovers_the_true_time(name):
    # Simulated truth: 25 invented nights, the true minimum displaced by up to
    # 4 min from the centre of the data.  Every estimate lies within 4.5 of its
    # own errors of the truth, and the pulls scatter like errors that are
    # neither much too small nor much too large (rms between 0.5 and 1.5; the
    # thorough pull tests of each method are in tests/timings/test_timings.py).
    rng = np.random.default_rng(2024)
    pulls = []
    for _ in range(25):
        t_min = T_CENTRE + rng.uniform(-0.003, 0.003)
        t, m, s = night(rng, t_min)
        r = estimate(name, t, m, s, **options(name, rng))
        assert r.method == name  # the result carries the name it was chosen by
        assert r.err > 0
        pulls.append((r.time - t_min) / r.err)
    pulls = np.array(pulls)
    assert np.all(np.abs(pulls) < 4.5), pulls
    assert 0.5 < np.sqrt(np.mean(pulls**2)) < 1.5, pulls


def test_estimate_is_the_function_itself():
    # Through the table or called directly: the same numbers (same seed for the bootstrap).
    rng = np.random.default_rng(5)
    t, m, s = night(rng, T_CENTRE + 0.001)
    for name, func in ESTIMATORS.items():
        via_table = estimate(name, t, m, s, **options(name, np.random.default_rng(1)))
        direct = func(t, m, s, **options(name, np.random.default_rng(1)))
        assert via_table == direct


def test_find_timings_reports_the_table_names():
    # find_timings names its main and check estimates by the table's names; a
    # minimum (Kwee & van Woerden with the symmetric polynomial) and a maximum
    # with the star's mean curve (the template with Kwee & van Woerden) use all three.
    rng = np.random.default_rng(11)
    t, m, s = night(rng, T_CENTRE)
    period = 0.8  # invented; the window is 0.08 d either side, the data's span
    (tm_min,), refused = find_timings(t, m, s, "n", "V", Ephemeris(T_CENTRE, period), rng=rng, n_boot=40)
    assert refused == []
    flipped = 2.0 * BASE - m  # the same curve as a maximum of light
    (tm_max,), refused = find_timings(
        t, flipped, s, "n", "V", Ephemeris(T_CENTRE, period, kind="maximum"), rng=rng, n_boot=40,
        template=lambda x: 2.0 * BASE - dip(x),
    )
    assert refused == []
    assert (tm_min.method, tm_min.check_method) == (KWEE_VAN_WOERDEN, SYMMETRIC_POLYNOMIAL)
    assert (tm_max.method, tm_max.check_method) == (MEAN_CURVE_TEMPLATE, KWEE_VAN_WOERDEN)
    reported = {tm_min.method, tm_min.check_method, tm_max.method, tm_max.check_method}
    assert reported == set(ESTIMATORS)
    for tm in (tm_min, tm_max):
        # Simulated truth: both estimates of the invented extremum land on it.
        assert abs(tm.bjd_tdb - T_CENTRE) < 4.0 * tm.err
        assert abs(tm.check_bjd_tdb - T_CENTRE) < 4.0 * tm.check_err


@pytest.mark.parametrize("bad", ["kvw", "Kwee-van-Woerden", "", None, ["kwee-van-woerden"]])
def test_unknown_name_lists_the_known_ones(bad):
    t = np.linspace(0.0, 1.0, 20)
    with pytest.raises(InputError) as err:
        estimate(bad, t, dip(t - 0.5), 0.01)
    message = str(err.value)
    assert "unknown extremum estimator" in message
    for name in ESTIMATORS:
        assert repr(name) in message


@pytest.mark.parametrize("name", [SYMMETRIC_POLYNOMIAL, MEAN_CURVE_TEMPLATE])
def test_weighted_estimators_need_errors(name):
    # The two weighted fits refuse to run without magnitude errors (one clear message).
    rng = np.random.default_rng(3)
    t, m, _ = night(rng, T_CENTRE)
    with pytest.raises(InputError, match="magnitude errors are needed"):
        estimate(name, t, m, None, **options(name, rng))
