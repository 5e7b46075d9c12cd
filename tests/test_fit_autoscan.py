"""The automatic scan's shortcuts (order.exact, delay.held_delay_reaches_floor, the hopeless
drop trials of pruning.prune_above): each leaves out work whose outcome it can tell, and
the choice stays the one the full work makes.

The plants are scenarios of our own (benchfit.fitting.synthetic); their generating
models are the truth the choices are checked against, and scipy.signal.freqs_zpk
evaluates the reference responses.
"""

from dataclasses import replace

import numpy as np
import pytest
from scipy import signal

from benchfit.fitting.delay import (
    choose_delay_order,
    delay_stepper,
    excess_phase_delay,
    held_delay_reaches_floor,
)
from benchfit.fitting.order import CHI_OK, Attempt
from benchfit.fitting.parameters import TWO_PI, Structure
from benchfit.fitting.problem import SCAN_POINTS, prepare
from benchfit.fitting.pruning import prune_above
from benchfit.fitting.synthetic import from_factors, sweep
from benchfit.fitting.vectfit import VFResult

BUCK = dict(poles_hz=(400.0,), zeros_hz=(25e3,), pairs=((250e3, 1.2),), delay_s=300e-9)


def _att(chi):
    vf = VFResult(poles=np.zeros(1, complex), residues=np.zeros(1, complex), d=0.0, e=0.0,
                  iterations=1, converged=True, flipped=np.zeros(0, complex))
    return Attempt(1, 1e-7, vf, 0.0, 0.0, chi)


def test_held_delay_reaches_floor_is_the_floor_test():
    assert held_delay_reaches_floor(_att(CHI_OK)) and held_delay_reaches_floor(_att(0.9))
    assert not held_delay_reaches_floor(_att(CHI_OK * 1.001))


def _buck_ctx(seed=0):
    m = from_factors(8.0, **BUCK)
    f = np.geomspace(20.0, 500e3, 601)
    r = sweep(m, f, noise_db=0.15, noise_deg=0.8, rng=np.random.default_rng(seed))
    # the sweep is the generating model's response (scipy.signal.freqs_zpk, the reference)
    _, h = signal.freqs_zpk(m.zeros, m.poles, m.k, TWO_PI * f)
    assert np.max(np.abs(np.log(r.response / (h * np.exp(-2j * np.pi * f * 300e-9))))) < 0.2
    ctx = prepare(r, "auto", "auto", None, None, "relative", 0, None).ctx.subsample(SCAN_POINTS)
    return ctx, excess_phase_delay(ctx.s.imag * ctx.scale / TWO_PI, ctx.h)


@pytest.mark.parametrize("seed", [0, 1])
def test_lazy_stepper_leaves_out_exactly_the_search_the_eager_one_runs(seed):
    ctx, tau0 = _buck_ctx(seed)
    eager, lazy = delay_stepper(ctx, tau0), delay_stepper(ctx, tau0, lazy=True)
    for n in range(1, 6):
        a, b = eager(n), lazy(n)
        if lazy.unsearched is b:
            # the order the scan stops at either way: the held delay reaches the floor,
            # and the search left out is the eager stepper's, to the last digit
            assert a.chi <= CHI_OK and b.chi <= CHI_OK
            c = lazy.search(b)
            assert (c.chi, c.tau_s) == (a.chi, a.tau_s)
            break
        assert (a.chi, a.tau_s) == (b.chi, b.tau_s)
    else:
        pytest.fail("no order reached the floor")
    # the delay scan with the lazy stepper finds the generating model's order: three
    # poles (400 Hz and the 250 kHz pair) and a delay near its 300 ns
    best, _, _ = choose_delay_order(ctx, tau0)
    assert best.order == 3
    assert best.tau_s == pytest.approx(300e-9, rel=0.25)


def _above_band_problem():
    """Two real poles in the band and a needed real zero at twice its top, three spare
    zeros far above: 10 Hz..100 kHz, 201 points, 0.01 dB / 0.05°."""
    f = np.geomspace(10.0, 100e3, 201)
    m = from_factors(1.0, poles_hz=(1e3, 30e3), zeros_hz=(200e3,))
    r = sweep(m, f, noise_db=0.01, noise_deg=0.05, rng=np.random.default_rng(5))
    pb = prepare(r, "auto", "none", None, None, "relative", 0, None, False)
    st = Structure(real_poles=2, real_zeros=1)
    kept = pb.refiner()(st, np.array([1.0, 1e3, 30e3, 200e3]))
    return pb, st, kept


def test_prune_above_skips_hopeless_drops_and_chooses_the_same():
    pb, st, kept = _above_band_problem()
    n_res = 2 * pb.n_points
    calls = []
    refit = pb.refiner()

    def counted(*a, **k):
        calls.append(1)
        return refit(*a, **k)

    full = prune_above(st, kept, counted, pb.f[-1], n_res)
    n_full = len(calls)
    calls.clear()
    quick = prune_above(st, kept, counted, pb.f[-1], n_res, predict=pb.linearised())
    # the 200 kHz zero (truth of the generating model) is kept either way ...
    assert full[0] == quick[0] == st and full[2] == quick[2] == 0
    z = quick[1].values[st.names.index("zero1_hz")]
    assert z == pytest.approx(200e3, rel=0.05)
    # ... and its drop trial, hopeless by one Gauss-Newton step, was not refined
    assert n_full >= 1 and len(calls) < n_full


def _scan_ctx(resp):
    return prepare(resp, "auto", "auto", None, None, "relative", 0, None).ctx.subsample(SCAN_POINTS)


def test_polish_ruled_out_only_where_no_delay_in_its_span_reaches_the_floor():
    from benchfit.fitting.delay import finer_delay_may_reach_floor, refine_delay, search_delay
    from benchfit.fitting.order import attempt, choose_order
    from benchfit.fitting.synthetic import converter_plant

    # The noisy 8-pole benchmark plant (no delay; its right-half-plane zero fakes one) at
    # order 6, two poles short: the coarse delay search leaves it at 1.56, the rule rules
    # the polish out, and the finest search over the same span indeed stays above the floor.
    r = sweep(converter_plant(), noise_db=0.1, noise_deg=0.5, rng=np.random.default_rng(0))
    ctx = _scan_ctx(r)
    _, scan = choose_order(ctx, 0.0, n_min=1, n_max=6, scan_all=True)
    a = search_delay(ctx, 6, 0.0, 1.3e-7, scan[-1].vf.poles, level="coarse", grid=7)
    assert CHI_OK < a.chi and not finer_delay_may_reach_floor(ctx, a)
    assert refine_delay(ctx, a, level="fine").chi > CHI_OK
    # The buck plant with little noise, at its order with the delay 20 % off its 300 ns:
    # the rule lets the polish run, and the polish reaches the floor near the truth.
    m = from_factors(8.0, **BUCK)
    r = sweep(m, np.geomspace(20.0, 500e3, 601), noise_db=0.01, noise_deg=0.05,
              rng=np.random.default_rng(0))
    ctx = _scan_ctx(r)
    a = attempt(ctx, 3, 360e-9, max_iter=6, tol=1e-4)
    assert CHI_OK < a.chi and finer_delay_may_reach_floor(ctx, a)
    b = refine_delay(ctx, a, level="polish")
    assert b.chi <= CHI_OK and abs(b.tau_s - 300e-9) < abs(a.tau_s - 300e-9)


def test_exact_one_lower_finds_the_generating_order_on_noiseless_data():
    from benchfit.fitting.delay import exact_one_lower
    from benchfit.fitting.order import attempt, exact
    from benchfit.fitting.synthetic import converter_plant

    # The noiseless 8-pole benchmark plant (no delay): an exact fit at order 9 steps down
    # to an exact one at order 8, the generating model's, and no further.
    ctx = _scan_ctx(sweep(converter_plant()))
    a9 = attempt(ctx, 9, 0.0)
    assert exact(a9)
    a8 = exact_one_lower(ctx, a9, None)
    assert a8 is not None and a8.order == 8 and exact(a8)
    assert exact_one_lower(ctx, a8, None) is None


def test_no_delay_scan_top_is_bounded_only_by_a_delay_hypothesis_at_the_floor():
    # Rule of hypotheses.no_delay_scan_top: a delay hypothesis at the floor bounds the
    # no-delay scan a few orders above its own order; one above the floor does not.
    from benchfit.fitting.hypotheses import DELAY_ORDER_SPAN, no_delay_scan_top

    at_floor = replace(_att(0.9 * CHI_OK), order=2)
    above = replace(_att(6e6), order=2)
    assert no_delay_scan_top(at_floor, 40) == 2 + DELAY_ORDER_SPAN
    assert no_delay_scan_top(at_floor, 4) == 4
    assert no_delay_scan_top(above, 40) == 40
    assert no_delay_scan_top(replace(_att(np.inf), order=2), 40) == 40
