"""Each choosing rule of the sweep planner on its own."""

import functools
import math

import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.planner import gainmargin as gmm
from benchfit.planner import linearity as lin
from benchfit.planner import placement as pl
from benchfit.planner.adaptive import (
    MAX_POINTS,
    MAX_TIME,
    PM_ONLY,
    PRECISION,
    AdaptiveResult,
    AdaptiveSettings,
    fit_band_start,
    gm_known,
    slow_pole_as_integrator,
    stop_reason,
)
from benchfit.planner.gainmargin import GainMarginState
from benchfit.planner.noise import (
    NoiseMap,
    PointSettings,
    TimeModel,
    choose_point_settings,
    component_sigma,
    noise_dominated,
    point_sigma,
    required_point_sigma,
)
from benchfit.planner.record import LogRow, append_row, create_log, log_path, read_log
from benchfit.planner.stopping import not_a_loop_gain
from benchfit.planner.uncertainty import consistent_draws, robust_sigma

# ----------------------------------------------------------------------------- placement


def test_a_crossing_gets_points_on_both_sides():
    measured = np.logspace(1, 5, 17)              # 4 per decade: 0.25 decade apart
    fc = 4.2e3                                     # 0.12 decade from either neighbour
    new = pl.crossing_points([fc], measured)
    assert any(f < fc for f in new) and any(f > fc for f in new)
    for f in new:
        assert abs(math.log10(f / fc)) <= pl.CROSSING_SIDE_DECADES
    # once both sides are close, nothing more is asked
    assert pl.crossing_points([fc], np.concatenate([measured, new])) == []
    # a side already measured closely gets nothing new
    assert all(f > 3.3e3 for f in pl.crossing_points([3.3e3], measured))


def test_a_resonance_gets_points_across_its_width():
    f0, q = 1.2e3, 8.0
    measured = np.logspace(1, 5, 17)
    new = pl.resonance_points([(f0, q)], measured, (10.0, 1e5))
    allf = np.concatenate([measured, new])
    lo, hi = f0 * (1 - 0.5 / q), f0 * (1 + 0.5 / q)   # -3 dB width f0/Q (second-order system)
    inside = allf[(allf >= lo) & (allf <= hi)]
    assert inside.size >= pl.POINTS_PER_WIDTH
    assert inside.min() < f0 < inside.max()           # points on both flanks, f0 and Q both seen
    assert pl.resonance_points([(f0, q)], allf, (10.0, 1e5)) == []


def test_model_resonances_and_which_decide():
    w = 2 * np.pi
    pair = np.roots([1, w * 1e3 / 10, (w * 1e3) ** 2])     # Q 10 at 1 kHz
    low_q = np.roots([1, w * 10 / 0.3, (w * 10) ** 2])     # Q 0.3: no resonance
    m = PlantModel(zeros=np.array([]), poles=np.concatenate([pair, low_q]), k=(w * 1e3) ** 2 * (w * 10) ** 2)
    res = pl.model_resonances(m)
    assert len(res) == 1 and res[0][0] == pytest.approx(1e3) and res[0][1] == pytest.approx(10)
    assert pl.deciding_resonances(res, lambda f: np.full(np.shape(f), 0.5)) == res
    assert pl.deciding_resonances(res, lambda f: np.full(np.shape(f), 1e-3)) == []   # -60 dB
    assert pl.deciding_resonances(res, lambda f: np.full(np.shape(f), 30.0)) == []   # +30 dB


def test_deciding_crossings_leave_out_quiet_phase_crossings():
    cr = [{"kind": "gain", "freq_hz": 1e3, "value": 50.0},
          {"kind": "phase", "freq_hz": 5e3, "value": 12.0},
          {"kind": "phase", "freq_hz": 5e4, "value": 45.0}]
    assert pl.deciding_crossings(cr) == [(1e3, "gain"), (5e3, "phase")]


def test_residual_points_around_a_missed_point():
    f = np.logspace(1, 3, 9)
    r = np.ones(9)
    r[4] = 6.0
    new = pl.residual_points(f, r)
    assert new == pytest.approx([math.sqrt(f[3] * f[4]), math.sqrt(f[4] * f[5])])
    assert pl.residual_points(f, np.ones(9)) == []


def test_variance_points_go_where_the_margin_is_decided_per_second():
    rng = np.random.default_rng(0)
    n, k = 400, 5
    y = 0.01 * rng.standard_normal((n, k)) + 1j * 0.01 * rng.standard_normal((n, k))
    pm = 50.0 * y[:, 2].imag + 0.1 * rng.standard_normal(n)      # PM follows the phase at cand 2
    cand = np.logspace(2, 3, k)
    picks = pl.variance_points(cand, y, [pm], [0.5], lambda f: np.full(k, 1e-3),
                               lambda f: np.ones(k), 3)
    assert picks and picks[0] == pytest.approx(cand[2])
    # the same candidate a thousand times dearer loses to a weaker but cheap one
    pm2 = pm + 25.0 * y[:, 0].imag
    cost = np.ones(k)
    cost[2] = 1e3
    picks = pl.variance_points(cand, y, [pm2], [0.5], lambda f: np.full(k, 1e-3), lambda f: cost, 1)
    assert picks == [pytest.approx(cand[0])]
    # a candidate that would be buried (infinite sigma) is never picked
    sig = np.full(k, 1e-3)
    sig[2] = np.inf
    assert cand[2] not in pl.variance_points(cand, y, [pm], [0.5], lambda f: sig, lambda f: np.ones(k), 3)
    # a GM whose crossing some draws lost (deviation inf) still steers the choice from the
    # draws that kept it, without a floating-point error (the PM target is flat here)
    gm = 40.0 * y[:, 4].real
    gm[:20] = np.inf
    with np.errstate(all="raise"):
        picks = pl.variance_points(cand, y, [np.zeros(n), gm], [0.5, 0.5], lambda f: np.full(k, 1e-3),
                                   lambda f: np.ones(k), 1)
    assert picks == [pytest.approx(cand[4])]


def test_densify_and_merge():
    measured = np.logspace(2, 4, 9)
    new = pl.densify_points([1e3], measured)
    assert new and all(abs(math.log10(f / 1e3)) < 0.5 for f in new)
    merged = pl.merge_new_points([1e3 * 1.0001, 5e5, 2e3], measured, (100.0, 1e4))
    assert merged == [2e3]          # a near-duplicate and a point outside the band are dropped


def test_coarse_grid():
    g = pl.coarse_grid(10.0, 1e5, 4)
    assert g[0] == pytest.approx(10) and g[-1] == pytest.approx(1e5) and g.size == 17


# ----------------------------------------------------------------------------- per-point settings


def test_required_sigma_is_tight_only_where_margins_are_decided():
    d = [(1e3, component_sigma("gain", 0.5, 0.5)), (1e4, component_sigma("phase", 0.5, 0.5))]
    near_gain = required_point_sigma(1.1e3, d)
    near_phase = required_point_sigma(1.1e4, d)
    assert near_gain == pytest.approx(math.sqrt(2) * math.radians(0.5) * 2)
    assert near_phase == pytest.approx(math.sqrt(2) * 0.5 / (20 / math.log(10)) * 2)
    assert math.isinf(required_point_sigma(1e2, d))


def test_point_settings_keep_wide_then_narrow_then_average():
    noise = NoiseMap(log_f=np.array([1.0, 5.0]), log_q=np.log10([1e-4, 1e-4]))   # flat q
    level = 0.01
    # no requirement: widest bandwidth (at most the frequency) and the default readings
    assert choose_point_settings(1e3, math.inf, level, noise, 1000.0, 1.0, 32) == PointSettings(1000.0, 3)
    assert choose_point_settings(50.0, math.inf, level, noise, 1000.0, 1.0, 32).bandwidth_hz == 50.0
    # scatter at bw B is 1e-4 sqrt(B) / 0.01 = 0.01 sqrt(B); with 3 readings sigma = that / sqrt 3
    ps = choose_point_settings(1e3, 0.05, level, noise, 1000.0, 1.0, 32)
    assert ps.repeats == 3 and ps.bandwidth_hz == pytest.approx(3 * (0.05 / 0.01) ** 2)
    assert point_sigma(1e3, ps, level, noise) == pytest.approx(0.05)
    # beyond the narrowest bandwidth: average more readings
    ps = choose_point_settings(1e3, 0.002, level, noise, 1000.0, 1.0, 32)
    assert ps.bandwidth_hz == 1.0 and ps.repeats == math.ceil((0.01 / 0.002) ** 2)
    assert choose_point_settings(1e3, 1e-6, level, noise, 1000.0, 1.0, 32).repeats == 32


def test_noise_map_recovers_a_trend_and_time_model_its_terms():
    f = np.logspace(1, 4, 25)
    q = 1e-5 * (f / 10.0) ** -1.0          # falls a decade per decade
    lv, bw = np.full(25, 0.02), np.minimum(f, 100.0)
    m = NoiseMap.from_points(f, q * np.sqrt(bw) / lv, lv, bw)
    assert np.allclose(m.q(f), q, rtol=1e-6)             # a straight trend is followed, ends too
    t = 0.003 + 7.0 / f + 3 / bw
    tm = TimeModel.from_points(f, t, np.full(25, 3), bw)
    assert tm.c0 == pytest.approx(0.003, rel=1e-6) and tm.c1 == pytest.approx(7.0, rel=1e-6)


def test_log_scatter_bias_makes_the_mean_log_unbiased():
    from benchfit.planner.noise import log_scatter_bias

    rng = np.random.default_rng(4)
    z = (rng.standard_normal((200000, 3)) + 1j * rng.standard_normal((200000, 3))) / np.sqrt(2)
    s = np.sqrt(np.sum(np.abs(z - z.mean(axis=1, keepdims=True)) ** 2, axis=1) / 2)   # true sigma 1
    assert np.mean(np.log10(s)) < -0.05                                                # biased low
    assert np.mean(np.log10(s)) + log_scatter_bias(np.array([3]))[0] == pytest.approx(0.0, abs=2e-3)


def test_noise_dominated():
    assert noise_dominated(0.5, 1.0) and not noise_dominated(0.1, 1.0)
    assert not noise_dominated(math.nan, 1.0)


# ----------------------------------------------------------------------------- stopping


def test_stop_reason_each_branch():
    s = AdaptiveSettings(10, 1e5, pm_sigma_deg=0.5, gm_sigma_db=0.5, max_points=50, max_time_s=100)
    known = GainMarginState(gmm.GM_KNOWN, 0.4)
    assert stop_reason(0.4, known, True, s, 20, 10.0) == PRECISION
    assert stop_reason(0.4, known, False, s, 20, 10.0) is None           # fit not adequate
    assert stop_reason(0.4, known, True, s, 20, 10.0, pending=2) is None  # a rule still asks
    assert stop_reason(0.6, known, True, s, 20, 10.0) is None
    assert stop_reason(0.6, known, True, s, 50, 10.0) == MAX_POINTS
    assert stop_reason(0.6, known, True, s, 20, 100.0) == MAX_TIME
    # the gain margin cannot be known from this capture: stop on the phase margin alone
    for status in (gmm.GM_BEYOND, gmm.GM_UNDETERMINED):
        assert stop_reason(0.4, GainMarginState(status, math.inf, "why"), True, s, 20, 10.0) == PM_ONLY
    assert stop_reason(0.6, GainMarginState(gmm.GM_BEYOND, math.nan), True, s, 20, 10.0) is None
    # not known yet (the rules still place points for it, or its sigma is too wide): go on
    assert stop_reason(0.4, GainMarginState(gmm.GM_PENDING, 0.8), True, s, 20, 10.0) is None


def test_gain_margin_state_each_branch():
    s = AdaptiveSettings(10, 1e5, gm_sigma_db=0.5)
    st = functools.partial(gmm.gain_margin_state, settings=s, phase_crossing_hz=5e5, usable_top_hz=6e5)
    assert st(20.0, 0.3, hiding=[], pending=0).status == gmm.GM_KNOWN
    assert st(45.0, 3.0, hiding=[], pending=0).status == gmm.GM_LARGE
    beyond = st(math.inf, 0.0, hiding=[], pending=0)
    assert beyond.status == gmm.GM_BEYOND and "600 kHz" in beyond.reason and not beyond.has_value
    assert st(20.0, math.inf, hiding=[], pending=2).status == gmm.GM_PENDING
    lost = st(20.0, math.inf, hiding=[], pending=0, why_unknown="the phase crossing is lost")
    assert lost.status == gmm.GM_UNDETERMINED and "lost" in lost.reason and lost.settled
    assert st(20.0, 0.3, hiding=[7e5], pending=1).status == gmm.GM_PENDING
    hidden = st(20.0, 0.3, hiding=[7e5, 8e5], pending=0)
    assert hidden.status == gmm.GM_UNDETERMINED and "buried" in hidden.reason
    assert st(20.0, 0.8, hiding=[], pending=0).status == gmm.GM_PENDING     # finite, too wide


def test_hidden_by_noise_frontier_and_giving_up():
    mag = {1e5: 0.5, 2e5: 0.1, 3e5: 0.05, 4e5: 0.01}.get       # -6, -20, -26, -40 dB
    buried = [(1e5, 1000.0, 3), (2e5, 1.0, 32), (3e5, 1000.0, 3), (4e5, 1000.0, 3)]
    hiding, again = gmm.hidden_by_noise(buried, [5e4], mag, min_bandwidth_hz=1.0, max_repeats=32)
    assert hiding == [1e5, 2e5, 3e5]              # 4e5 is 40 dB down: a crossing there is > 30 dB
    assert again == [1e5, 3e5]                    # 2e5 was measured at 1 Hz with 32 readings
    # measured above the noise since (a usable point within 0.004 decade): hides nothing
    hiding, again = gmm.hidden_by_noise(buried, [1.0005e5], mag, min_bandwidth_hz=1.0, max_repeats=32)
    assert 1e5 not in hiding


def test_beyond_crossing_points_pin_a_crossing_at_the_end_of_the_data():
    usable = list(np.logspace(4, math.log10(5.4e5), 20))      # data end 0.006 decade above 532 kHz
    got = pl.beyond_crossing_points([5.32e5], usable, 3e6, lambda f: True)
    assert len(got) == 2 and got[-1] == pytest.approx(5.32e5 * 10 ** pl.BEYOND_DECADES)
    assert all(f > 5.4e5 for f in got)
    assert pl.beyond_crossing_points([5.32e5], usable + [7e5], 3e6, lambda f: True) == []
    assert pl.beyond_crossing_points([5.32e5], usable, 3e6, lambda f: False) == []   # would be buried
    capped = pl.beyond_crossing_points([5.32e5], usable, 6e5, lambda f: True)
    assert max(capped) == pytest.approx(6e5)                    # not beyond the band's top


def test_not_a_loop_gain():
    f = np.logspace(1, 5, 17)
    loop = 1e4 / (1j * f)                                       # crosses 0 dB at 10 kHz
    assert not_a_loop_gain(f, loop) == ""
    why = not_a_loop_gain(f, 0.1 / (1 + 1j * f / 1e3))         # an impedance far below 1
    assert "no gain crossing" in why and "-20.0 dB" in why
    assert "no gain crossing" in not_a_loop_gain(f, 100 / (1 + 1j * f / 1e6))
    assert "above the noise" in not_a_loop_gain(f[:1], loop[:1])


def test_level_verdict_each_branch():
    def comp(level, changed):
        return lin.LevelComparison(1e3, level, 0.01, -1.0 if changed else 0.0, 0.0, 0.1, changed)
    ok = lin.level_verdict(0.01, [comp(0.005, False), comp(0.02, False)], auto_level=False,
                           halvings=0, max_halvings=4)
    assert ok.message.startswith("linear") and ok.level_v == 0.01 and not ok.warn
    inside = lin.level_verdict(0.01, [comp(0.005, False), comp(0.02, True)], auto_level=False,
                               halvings=0, max_halvings=4)
    assert "continuing at 10 mV, inside it" in inside.message and not inside.warn
    high = [comp(0.005, True), comp(0.02, True)]
    told = lin.level_verdict(0.01, high, auto_level=False, halvings=0, max_halvings=4)
    assert "lower --level" in told.message and told.warn and told.level_v == 0.01
    halved = lin.level_verdict(0.01, high, auto_level=True, halvings=1, max_halvings=4)
    assert halved.level_v == 0.005 and "--auto-level" in halved.message
    spent = lin.level_verdict(0.01, high, auto_level=True, halvings=4, max_halvings=4)
    assert spent.warn and spent.level_v == 0.01 and "4 halvings" in spent.message


def test_gm_known_beyond_the_deciding_range():
    s = AdaptiveSettings(10, 1e5, gm_sigma_db=0.5)
    assert gm_known(10.0, 0.4, s) and not gm_known(10.0, 0.6, s)
    assert gm_known(45.0, 3.0, s)           # 45 - 2*3 = 39 dB > 30 dB: known to be large
    assert not gm_known(32.0, 3.0, s) and not gm_known(45.0, math.inf, s)
    assert not gm_known(math.inf, 0.0, s) and not gm_known(math.nan, 0.0, s)   # beyond the band


def test_slow_pole_and_fit_band():
    from benchfit.fitting.result import FitResult, Parameter

    def fr(pole_hz):
        return FitResult(model=PlantModel(np.array([]), np.array([-2 * np.pi * pole_hz]), 1.0),
                         parameters=(Parameter("gain", 1.0), Parameter("pole1_hz", pole_hz)), stats={})
    assert slow_pole_as_integrator(fr(3.0), 20.0)
    assert not slow_pole_as_integrator(fr(300.0), 20.0)
    assert fit_band_start([5e3, 2.5e4], 20.0) == pytest.approx(5e3 / 10 ** 1.5)
    assert fit_band_start([100.0], 20.0) == 20.0
    assert fit_band_start([], 20.0) == 20.0


def test_settings_validation_names_the_option():
    with pytest.raises(InputError, match="--pm-sigma"):
        AdaptiveSettings(10, 1e5, pm_sigma_deg=0).validate()
    with pytest.raises(InputError, match="--min-bandwidth"):
        AdaptiveSettings(10, 1e5, bandwidth_hz=10, min_bandwidth_hz=100).validate()
    with pytest.raises(InputError, match="--stop"):
        AdaptiveSettings(10, 5).validate()


# ----------------------------------------------------------------------------- uncertainty


def test_consistent_draws_drop_what_the_data_contradict():
    rng = np.random.default_rng(2)
    f = np.logspace(1, 3, 30)
    truth = 1 / (1 + 1j * f / 100)
    sd = np.full(30, 0.01)
    meas = truth + 0.01 / np.sqrt(2) * (rng.standard_normal(30) + 1j * rng.standard_normal(30))
    # the least-squares pole and its sigma from the chi-square curvature
    w = 2 / sd ** 2

    def h(p):
        return 1 / (1 + 1j * f / p)

    grid = np.linspace(90, 110, 20001)
    chi = np.array([np.sum(w * np.abs(h(p) - meas) ** 2) for p in grid])
    p_hat = grid[np.argmin(chi)]
    jac = (h(p_hat * 1.0001) - h(p_hat * 0.9999)) / (p_hat * 0.0002)
    sigma = 1 / math.sqrt(np.sum(w * np.abs(jac) ** 2))
    poles = p_hat + sigma * rng.standard_normal(400)
    draws = 1 / (1 + 1j * f[None, :] / poles[:, None])
    flipped = 1 / (1 - 1j * f / p_hat)              # the pole drawn into the right half-plane
    keep = consistent_draws(np.vstack([draws, flipped]), meas, sd, h(p_hat), 1, 1.0)
    assert keep[:-1].mean() > 0.98 and not keep[-1]


def test_consistent_draws_reject_far_draws_without_overflow():
    # a loose parameter drawn far in log coordinates gives |T| ~ 1e160 (its square overflows
    # a double) or a non-finite response: both are rejected, with no floating-point error,
    # and the verdict on ordinary draws is the plain chi-square sum's (chi-square law, scipy.stats)
    rng = np.random.default_rng(4)
    f = np.logspace(1, 3, 30)
    meas = 1 / (1 + 1j * f / 100)
    sd = np.full(30, 0.01)
    near = meas[None, :] + 0.003 * (rng.standard_normal((50, 30)) + 1j * rng.standard_normal((50, 30)))
    far = np.vstack([np.full(30, 1e160 + 0j), np.where(f > 500, np.nan + 0j, meas)])
    with np.errstate(all="raise"):
        keep = consistent_draws(np.vstack([near, far]), meas, sd, meas, 2, 1.0)
    from scipy.stats import chi2
    c = np.sum(2 / sd ** 2 * np.abs(near - meas) ** 2, axis=1)
    assert np.array_equal(keep[:50], c <= chi2.ppf(1 - 1e-3, 2))
    assert not keep[50] and not keep[51]


def test_robust_sigma_is_sigma_for_a_normal_spread():
    x = np.random.default_rng(3).standard_normal(20000) * 2.0
    assert robust_sigma(x) == pytest.approx(2.0, rel=0.03)
    assert math.isinf(robust_sigma(np.array([1.0, np.nan])))


# ----------------------------------------------------------------------------- linearity


def test_level_change_rule_and_linear_range():
    assert lin.level_changes_response(1.0, 0.001, 1.01, 0.001)        # 1 % change, 0.14 % noise
    assert not lin.level_changes_response(1.0, 0.01, 1.01, 0.01)       # within the noise
    ok = [lin.compare(1e3, 0.01, 1.0, 1e-3, lv, 1.0 + 1e-4, 1e-3) for lv in (0.005, 0.02)]
    assert lin.linear_level_range(0.01, ok) == (0.005, 0.02)
    bad_high = [ok[0], lin.compare(1e3, 0.01, 1.0, 1e-3, 0.02, 0.95, 1e-3)]
    assert lin.linear_level_range(0.01, bad_high) == (0.005, 0.01)
    bad_low = [lin.compare(1e3, 0.01, 1.0, 1e-3, 0.005, 1.05, 1e-3), ok[1]]
    assert all(math.isnan(v) for v in lin.linear_level_range(0.01, bad_low))
    assert bad_high[1].change_db == pytest.approx(20 * math.log10(0.95))


# ----------------------------------------------------------------------------- record


def row(f, purpose="coarse"):
    return LogRow(f, complex(1, -1), 1e-3, 0.01, 100.0, 3, 0.5, 1e-3, purpose, True)


def test_log_round_trip_torn_line_and_changed_setting(tmp_path):
    out = tmp_path / "loop.csv"
    lp = log_path(out)
    assert lp.name == "loop.log.csv"
    settings = AdaptiveSettings(10, 1e5).to_dict()
    create_log(lp, settings)
    for f in (10.0, 20.0):
        append_row(lp, row(f))
    with open(lp, "a", encoding="utf-8") as fh:
        fh.write("3.0e1,1.0,")               # a crash mid-line
    with pytest.raises(InputError, match="incomplete"):
        read_log(lp, settings)
    rows = read_log(lp, settings, repair=True)
    assert [r.freq_hz for r in rows] == [10.0, 20.0]
    assert lp.read_text().endswith("\n")
    changed = AdaptiveSettings(10, 1e5, pm_sigma_deg=0.2).to_dict()
    with pytest.raises(InputError, match="--pm-sigma"):
        read_log(lp, changed)
    with pytest.raises(InputError, match="exists"):
        create_log(lp, settings)


def test_result_json_round_trip():
    r = AdaptiveResult(path="a.csv", log_path="a.log.csv", points=10, points_measured=12, readings=36,
                       instrument_time_s=3.5, phase_margin_deg=50.0, phase_margin_sigma_deg=0.3,
                       gain_margin_db=math.inf, gain_margin_sigma_db=0.0, crossover_hz=1e3,
                       phase_crossover_hz=math.nan, stopped_because=PRECISION, rounds=3, level_v=0.01,
                       settings=AdaptiveSettings(10, 1e5).to_dict(), history=({"points": 10},))
    import json

    from benchfit.fileio import to_json_text
    back = AdaptiveResult.from_dict(json.loads(to_json_text(r.to_dict())))
    assert back.gain_margin_db == math.inf and math.isnan(back.phase_crossover_hz)
    assert back.points == 10 and back.stopped_because == PRECISION and back.history == ({"points": 10},)


def test_stability_warnings_say_what_the_nyquist_verdict_adds():
    # Loops checked against python-control (closed-loop poles of feedback(T, 1)):
    # T1 = 10(s+1)/(s(s-1)) is open-loop unstable (one RHP pole) and stable in closed loop;
    # T2 = 2/((s+1)^3) (gain 2 < 8) is stable both ways; T3 = 20/((s+1)^3) is unstable closed.
    import control

    from benchfit.fitting.model import PlantModel
    from benchfit.loop.margins import margins_of_model
    from benchfit.planner.stability import stability_warnings

    s = control.tf("s")
    cases = [(10 * (s + 1) / (s * (s - 1)), [0.0, 1.0], [-1.0], 10.0),
             (2 / (s + 1) ** 3, [-1.0] * 3, [], 2.0), (20 / (s + 1) ** 3, [-1.0] * 3, [], 20.0)]
    said = []
    for tf, poles, zeros, k in cases:
        cl_stable = bool(np.all(control.poles(control.feedback(tf, 1)).real < 0))
        m = margins_of_model(PlantModel(np.array(zeros, complex), np.array(poles, complex), k))
        assert m.closed_loop_stable == cl_stable
        said.append(stability_warnings(m))
    assert len(said[0]) == 1 and "right-half-plane" in said[0][0]
    assert said[1] == []
    assert any("in closed loop" in w and "do not describe a stable loop" in w for w in said[2])
