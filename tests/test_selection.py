"""Each model-choice rule of benchfit.fitting (selection.py, groups.py, pruning.py) on its own.

The fits behind the rules are in tests/test_fit_model_choice.py; here every rule
gets inputs whose answer follows from its definition (Schwarz's criterion:
G. Schwarz, Ann. Statist. 6(2), 1978; "very strong" evidence at a BIC
difference of 10: Kass & Raftery, J. Amer. Statist. Assoc. 90(430), 1995).
"""

import numpy as np
import pytest
from scipy import signal

from benchfit.data import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fitting.groups import (
    below_noise,
    cancelling,
    conform,
    groups_above,
    narrower_than_spacing,
    unidentified,
    without,
)
from benchfit.fitting.hypotheses import Hypothesis, choose
from benchfit.fitting.parameters import TWO_PI, Structure, response
from benchfit.fitting.problem import passive, prepare
from benchfit.fitting.refine import Refined
from benchfit.fitting.selection import (
    CLOSE_CALL,
    above_band_trials,
    bic,
    delay_worth_testing,
    drop_allowed,
    ic_allows,
    prunable,
    redchi_allows,
    unstable_demanded,
)
from benchfit.fitting.synthetic import from_factors, sweep
from benchfit.fitting.weights import PointSigma


def _ref(chisqr, n_res, n_par, values=(), stderr=None, success=True):
    values = np.asarray(values, dtype=float)
    return Refined(values=values, stderr=np.zeros_like(values) if stderr is None else
                   np.asarray(stderr, dtype=float), varied=tuple(f"p{i}" for i in range(n_par)),
                   covariance=np.eye(n_par), evaluations=1, success=success, chisqr=chisqr,
                   redchi=chisqr / (n_res - n_par), message="")


N = 500  # residuals


def test_ic_allows_a_drop_exactly_up_to_schwarz_penalty():
    kept = _ref(N - 6.0, N, 6)                      # reduced χ² 1
    pen = np.log(N)                                 # ln N per parameter (Schwarz 1978)
    assert ic_allows(kept, _ref(N - 6.0 + 1.99 * pen, N, 4), 2, N)
    assert not ic_allows(kept, _ref(N - 6.0 + 2.01 * pen, N, 4), 2, N)


def test_redchi_never_lets_a_drop_leave_the_floor():
    at_floor = _ref(N - 6.0, N, 6)                   # 1.0
    assert redchi_allows(at_floor, _ref(1.2 * (N - 5), N, 5))     # 1.2: still at the floor
    assert not redchi_allows(at_floor, _ref(1500.0 * (N - 5), N, 5))
    above = _ref(3.0 * (N - 6), N, 6)                # a fit above the floor: may not rise 5 %
    assert redchi_allows(above, _ref(3.1 * (N - 5), N, 5))
    assert not redchi_allows(above, _ref(3.3 * (N - 5), N, 5))


def test_drop_allowed_needs_both_and_a_waiver_only_lifts_the_criterion():
    kept = _ref(N - 6.0, N, 6)
    costly = _ref(N - 6.0 + 40.0, N, 5)              # 40 > ln 500 = 6.2, reduced χ² 1.09
    assert not drop_allowed(kept, costly, 1, N)
    assert drop_allowed(kept, costly, 1, N, waived=True)
    far = _ref(2.0 * N, N, 5)                         # waived, but the residual doubles
    assert not drop_allowed(kept, far, 1, N, waived=True)


def test_bic_is_schwarz_and_equal_for_exact_fits():
    r = _ref(250.0, N, 4)
    assert bic(r, N) == pytest.approx(N * np.log(250.0 / N) + 4 * np.log(N))
    # Fits far below the floor (noiseless data) compare by size only.
    assert bic(_ref(1e-20, N, 4), N) < bic(_ref(1e-25, N, 5), N)


def test_delay_worth_testing_weighs_excess_phase_then_the_residual():
    f_max = 1e6
    assert delay_worth_testing(0.05 / (TWO_PI * f_max) * 1.01, f_max)
    assert not delay_worth_testing(0.0, f_max)
    assert not delay_worth_testing(0.0, f_max, chi_without=1.05)   # at the floor
    assert delay_worth_testing(0.0, f_max, chi_without=1.6)        # structure left over


class _Stub:
    def __init__(self, chisqr, points, p):
        self.stats = {"points": points, "reduced_chi2": chisqr / max(2 * points - p, 1)}
        self.varied = tuple(range(p))


def test_unstable_demanded_by_the_bic_margin():
    n = 200
    unstable = _Stub(400.0, n, 5)
    demanded, margin = unstable_demanded(unstable, _Stub(400.0 * np.exp(30.0 / 400), n, 5))
    assert demanded and margin == pytest.approx(30.0, rel=0.02)
    demanded, margin = unstable_demanded(unstable, _Stub(400.0 * np.exp(5.0 / 400), n, 5))
    assert not demanded and 0 < margin < CLOSE_CALL
    assert unstable_demanded(unstable, _Stub(399.0, n, 5))[1] < 0   # the stable one is better


def test_choose_takes_the_lowest_bic_and_decides_close_calls_on_every_point():
    a = Hypothesis(None, Structure(1), _ref(100.0, 200, 3), [])
    b = Hypothesis(None, Structure(2), _ref(99.0, 200, 4), [])     # within CLOSE_CALL of a
    assert choose([a, b], 200, 200, None) is a                     # fewer parameters
    redone = {id(a.st): 1000.0, id(b.st): 900.0}

    def refit_all(st, values):
        return _ref(redone[id(st)], 1000, 3 if st is a.st else 4)

    assert choose([a, b], 200, 1000, refit_all).st is b.st          # every point decides


def test_groups_above_lists_poles_and_zeros_above_the_band_and_rhp_zeros_near_its_top():
    st = Structure(real_poles=2, real_zeros=2)
    v = np.array([1.0, 1e3, 350e3, -60e3, 5e6])
    got = dict(groups_above(st, v, 100e3))
    assert got == {"pole2": 350e3, "zero2": 5e6}
    assert "zero1" in dict(groups_above(st, v, 100e3, rhp_from=50e3))
    assert "pole2" not in dict(groups_above(st, v, 100e3, poles=False))


def test_cancelling_pairs_within_one_percent():
    st = Structure(real_poles=2, real_zeros=1)
    v = np.array([1.0, 1e3, 20e3, 20.1e3])
    assert cancelling(st, v) == [["pole2", "zero1"]]
    assert cancelling(st, np.array([1.0, 1e3, 20e3, 21e3])) == []


def test_narrower_than_spacing_and_below_noise():
    f = np.geomspace(1e3, 1e5, 101)                  # spacing about 4.7 % of f
    st = Structure(pole_pairs=1, zero_pairs=1)
    assert narrower_than_spacing(st, np.array([1.0, 1e4, 500.0, 1e4, 400.0]), "pair1", f)
    assert not narrower_than_spacing(st, np.array([1.0, 1e4, 5.0, 1e4, 4.0]), "pair1", f)
    sig = PointSigma(np.full(f.shape, 0.01), np.full(f.shape, 0.01), "test")
    tiny = np.array([1.0, 1e4, 5.0, 1.00001e4, 5.0])
    assert below_noise(st, tiny, ["pair1", "zero_pair1"], f, sig)
    big = np.array([1.0, 1e4, 5.0, 1.2e4, 5.0])
    assert not below_noise(st, big, ["pair1", "zero_pair1"], f, sig)


def test_unidentified_names_groups_whose_sigma_exceeds_the_value():
    st = Structure(real_poles=2)
    ref = _ref(100.0, 200, 3, values=[1.0, 1e3, 5e6], stderr=[0.01, 1.0, 9e6])
    assert unidentified(st, ref) == ["pole2"]


def test_without_removes_whole_groups():
    st = Structure(real_poles=1, pole_pairs=1, real_zeros=1)
    st2, v2 = without(st, np.array([1.0, 10.0, 20.0, 2.0, 30.0]), ["pair1"])
    assert st2.names == ("gain", "pole1_hz", "zero1_hz")
    np.testing.assert_array_equal(v2, [1.0, 10.0, 30.0])


def test_conform_splits_a_pair_into_the_real_poles_the_user_names():
    # Reference for "same roots": scipy.signal.freqs_zpk on both structures.
    st = Structure(pole_pairs=1)
    v = np.array([1.0, 20e3, 0.4])                    # overdamped pair: two real roots
    st2, v2 = conform(st, v, {"pole2_hz": 50e3}, {}, order_given=True)
    assert (st2.real_poles, st2.pole_pairs) == (2, 0)
    np.testing.assert_allclose(v2[1:], [20e3, 20e3])  # critically damped start at f0
    # Two real poles merged into the pair with the same roots (f0 = sqrt(f1 f2), Q ≤ 0.5).
    st3, v3 = conform(Structure(real_poles=2), np.array([1.0, 1e3, 9e3]), {}, {"pair1_q": (0, 5)})
    assert (st3.real_poles, st3.pole_pairs) == (0, 1)
    f = np.geomspace(10, 1e6, 50)
    w = TWO_PI * f
    p = [-TWO_PI * 1e3, -TWO_PI * 9e3]
    _, h_ref = signal.freqs_zpk([], p, np.prod(np.abs(p)), w)
    np.testing.assert_allclose(response(st3, v3, 1j * w), h_ref, rtol=1e-9)


def test_conform_refuses_what_the_order_cannot_hold_naming_the_option():
    st = Structure(real_poles=2)
    with pytest.raises(InputError, match="no parameter 'pole3_hz'") as e:
        conform(st, np.array([1.0, 1e3, 2e3]), {"pole3_hz": 5e3}, {}, order_given=True)
    assert e.value.source == "--fix"
    with pytest.raises(InputError, match="no parameter 'nope_hz'") as e:
        conform(st, np.array([1.0, 1e3, 2e3]), {}, {"nope_hz": (1, 2)})
    assert e.value.source == "--bound"


def test_conform_holds_the_pole_nearest_the_fixed_value():
    st = Structure(real_poles=2)
    _, v = conform(st, np.array([1.0, 1e3, 350e3]), {"pole1_hz": 340e3}, {})
    np.testing.assert_array_equal(v, [1.0, 350e3, 1e3])


def test_conform_adds_a_bounded_delay():
    st2, v2 = conform(Structure(real_poles=1), np.array([1.0, 1e3]), {}, {"delay_s": (1e-7, 2e-7)})
    assert st2.delay and v2[-1] == pytest.approx(1e-7)


def _pb(order="auto", fix=None, bounds=None, quantity="plant"):
    m = from_factors(1.0, poles_hz=(1e3,))
    r = sweep(m, np.geomspace(10, 1e5, 60), quantity=quantity)
    return prepare(r, order, "none", None, fix, "relative", 0, bounds)


def test_prunable_honours_the_order_and_what_the_user_holds():
    assert prunable(_pb()) == {"poles": True, "zeros": True, "cancelling": True}
    assert prunable(_pb(order=2)) == {"poles": False, "zeros": True, "cancelling": False}
    assert prunable(_pb(fix={"zero1_hz": 5e3})) == {"poles": True, "zeros": False,
                                                    "cancelling": False}


def test_above_band_trials_run_with_auto_order_or_a_delay_to_offer():
    # --order auto: every group above the band is tried; --order N without a delay to
    # offer: only the groups the data cannot locate (prune_unidentified); --order N with
    # --delay auto keeps the delay swap and so the full set.
    assert above_band_trials(_pb())
    assert not above_band_trials(_pb(order=2))
    m = from_factors(1.0, poles_hz=(1e3,))
    r = sweep(m, np.geomspace(10, 1e5, 60))
    assert above_band_trials(prepare(r, 2, "auto", None, None, "relative", 0, None))
    assert not above_band_trials(prepare(r, 2, 1e-6, None, None, "relative", 0, None))


def test_fixed_order_keeps_a_located_zero_and_drops_one_the_data_cannot_locate():
    # Two poles, 1 kHz and 350 kHz above a 100 kHz band; order 2 given.  Vector fitting's
    # spare zero above the band is one the data cannot locate: it is still tried and goes
    # (prune_unidentified).  A real zero at 60 kHz, which the data locate, stays.
    from benchfit.fitting import fit
    f = np.geomspace(10.0, 1e5, 201)
    rng = np.random.default_rng(0)
    r = sweep(from_factors(1.0, poles_hz=(1e3, 350e3)), f, noise_db=0.01, noise_deg=0.05, rng=rng)
    assert [p.name for p in fit(r, order=2, delay="none").parameters] == \
        ["gain", "pole1_hz", "pole2_hz"]
    r = sweep(from_factors(1.0, poles_hz=(1e3, 350e3), zeros_hz=(60e3,)), f, noise_db=0.01,
              noise_deg=0.05, rng=rng)
    res = fit(r, order=2, delay="none")
    assert [p.name for p in res.parameters] == ["gain", "pole1_hz", "pole2_hz", "zero1_hz"]
    assert res.parameter("zero1_hz").value == pytest.approx(60e3, rel=0.05)


def test_passive_data_are_impedances_and_scattering_never_above_one():
    assert _pb(quantity="impedance").stable
    assert not _pb().stable
    f = np.geomspace(1e6, 1e9, 20)
    meta = {"dialect": {"format": "touchstone v1", "parameter": "S21"}}
    s = FrequencyResponse(freq_hz=f, response=0.5 / (1 + 1j * f / 1e8), meta=meta)
    assert passive(s)
    amp = FrequencyResponse(freq_hz=f, response=5.0 / (1 + 1j * f / 1e8), meta=meta)
    assert not passive(amp)


def test_drop_far_tests_groups_beyond_3x_on_the_data():
    # Data: 1/((1+s/ω1k)(1+s/ω350k)) over 10 Hz..100 kHz, 0.01 dB / 0.05 deg noise.
    from benchfit.fitting.hypotheses import drop_far

    m = from_factors(1.0, poles_hz=(1e3, 350e3))
    r = sweep(m, np.geomspace(10, 1e5, 201), noise_db=0.01, noise_deg=0.05,
              rng=np.random.default_rng(7))
    pb = prepare(r, "auto", "none", None, None, "relative", 0, None)
    st = Structure(real_poles=2, real_zeros=1)
    v = np.array([1.0, 1e3, 350e3, 1e12])             # a zero at 1e7 x f_max: nothing in band
    st2, v2, notes = drop_far(pb, st, v, None)
    assert st2.names == ("gain", "pole1_hz", "pole2_hz") and notes
    st3, _, notes3 = drop_far(pb, st2, v2, None)      # the 350 kHz pole costs 3.8 deg: kept
    assert st3 == st2 and not notes3
    pb2 = prepare(r, 2, "none", None, None, "relative", 0, None)
    assert drop_far(pb2, st, v, None)[0] == st2       # zeros may go with --order N
    assert drop_far(pb2, Structure(real_poles=3), np.array([1.0, 1e3, 350e3, 1e12]),
                    None)[0].real_poles == 3          # poles may not



def test_pole_trial_offers_a_pole_for_a_lagging_zero_just_above_the_band():
    from benchfit.fitting.groups import with_pole
    from benchfit.fitting.pruning import pole_trial

    # Right-half-plane zero at 249 kHz and a zero pair at 261 kHz over a 100 kHz band.
    st = Structure(real_poles=1, real_zeros=1, zero_pairs=1)
    v = np.array([2.0, 100.0, -249e3, 261e3, 70.0])
    groups, f_pole = pole_trial(st, v, 100e3)
    assert sorted(groups) == ["zero1", "zero_pair1"] and f_pole == pytest.approx(249e3)
    assert pole_trial(st, v, 100e3, poles=False) is None           # --order N: no new pole
    assert pole_trial(Structure(real_poles=1, real_zeros=1), np.array([1.0, 1e2, 5e5]),
                      100e3) is None                               # a left-half-plane zero
    st2, v2 = with_pole(*without(st, v, groups), f_pole)
    assert st2.names == ("gain", "pole1_hz", "pole2_hz")
    np.testing.assert_array_equal(v2, [2.0, 100.0, 249e3])


def test_choose_sets_aside_a_hypothesis_whose_delay_came_out_negative():
    st_d = Structure(real_poles=1, delay=True)
    neg = Hypothesis(None, st_d, _ref(90.0, 200, 3, values=[1.0, 1e3, -1e-12]), [])
    ok = Hypothesis(None, Structure(real_poles=1), _ref(100.0, 200, 2, values=[1.0, 1e3]), [])
    assert choose([neg, ok], 200, 200, None) is ok
    assert choose([neg], 200, 200, None) is neg      # nothing else to take


def _att(order, tau_s, chi):
    from benchfit.fitting.order import Attempt
    from benchfit.fitting.vectfit import VFResult
    vf = VFResult(poles=np.zeros(order, complex), residues=np.zeros(order, complex), d=0.0, e=0.0,
                  iterations=1, converged=True, flipped=np.zeros(0, complex))
    return Attempt(order, tau_s, vf, 0.0, 0.0, chi)


def test_distinct_keeps_the_best_start_of_each_order_and_delay():
    from benchfit.fitting.selection import distinct, screen
    a, b, c, d = _att(8, 0.0, 2e-7), _att(8, 0.0, 1e-7), _att(9, 0.0, 3e-7), _att(8, 5e-8, 1e-7)
    # b repeats a's hypothesis (order 8, no delay) with the lower residual; c and d differ
    assert distinct([a, b, c, d]) == [b, c, d]
    assert distinct([b, a]) == [b]
    assert screen([a, b, c, d], N) == [b, c, d]


def test_exact_attempts_end_the_order_scan():
    from benchfit.fitting.order import NEGLIGIBLE, choose_order, exact
    assert exact(_att(3, 0.0, NEGLIGIBLE)) and not exact(_att(3, 0.0, 1.01 * NEGLIGIBLE))
    chis = {1: 50.0, 2: 1e-6, 3: 1e-7, 4: 1e-8}
    seen = []

    def step(n):
        seen.append(n)
        return _att(n, 0.0, chis[n])

    from types import SimpleNamespace
    best, scan = choose_order(SimpleNamespace(s=np.zeros(100)), step=step, n_min=1, n_max=4)
    # order 2 is exact: nothing above it could replace it, so the scan stops there
    assert best.order == 2 and seen == [1, 2]
