"""Whatever a scope writes, the step code answers with a result or a clear InputError."""

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchfit.errors import FitError, InputError
from benchfit.steps.fit import fit_load_step, fit_step
from benchfit.steps.loadstep import measure_load_step
from benchfit.steps.measure import measure_step
from benchfit.steps.models import second_order_step


@st.composite
def traces(draw):
    n = draw(st.integers(20, 600))
    kind = draw(st.sampled_from(["step", "noise", "constant", "quantised", "spikes"]))
    t = np.linspace(draw(st.floats(-1e-3, 0.0)), draw(st.floats(1e-4, 1e-2)), n)
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    if kind == "constant":
        y = np.full(n, draw(st.floats(-10, 10)))
    elif kind == "noise":
        y = rng.standard_normal(n)
    else:
        y = second_order_step(t, draw(st.floats(0.02, 5.0)), draw(st.floats(10.0, 1e6)),
                              draw(st.floats(-5, 5)), draw(st.floats(-2, 2)),
                              draw(st.floats(float(t[0]), float(t[-1]))))
        y = y + draw(st.floats(0.0, 0.2)) * rng.standard_normal(n)
        if kind == "quantised":  # an 8-bit scope: few distinct codes, long runs
            lsb = (np.ptp(y) or 1.0) / 255.0
            y = np.round(y / lsb) * lsb
        if kind == "spikes":
            y[rng.integers(0, n, 3)] += 50.0
    return t, y


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(traces())
def test_measurements_never_crash(trace):
    for fn in (measure_step, measure_load_step):
        try:
            m = fn(trace)
        except InputError as e:
            assert str(e)  # a message a user can act on
            continue
        d = m.to_dict()
        assert d["samples"] == trace[0].size


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(traces())
def test_fits_never_crash(trace):
    for fit in (fit_step, fit_load_step):
        try:
            f = fit(trace)
        except (InputError, FitError) as e:
            assert str(e)
            continue
        assert np.all(np.isfinite(f.fitted_v))
        assert f.parameter("zeta").value > 0
