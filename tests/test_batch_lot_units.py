"""Single units of the benchmark lot (benchmarks/batch_scaling.py, seed 7) that the batch
task once fitted well and now does not.

Reference for the margins: python-control's ``stability_margins`` (general-purpose
reference library) on the unit's noiseless true loop (generating model × lot
compensator × divider), densely sampled.
"""

import numpy as np
import pytest

from benchfit.batch.limits import parse_limits
from benchfit.batch.synth_lot import lot_design, make_lot, unit_sweep
from benchfit.batch.task import TaskSettings, design_loop_from_dict, run_task

control = pytest.importorskip("control")


# Regression: between fitting commits 2ff864a and the close-call rule this unit was fitted
# without its 1 us delay (order 4, 0.27 dB = 10x the noise floor): the coarse delay search
# left order 2 at 1.17x the floor, and on the thinned copy a pole pair and zero pair above
# the band beat the delay by 1.6 in BIC.  At c5047da it was order 2 + 0.999 us, 0.034 dB.
def test_unit_979_of_the_benchmark_lot_fits_at_the_noise_floor(tmp_path):
    path = make_lot(tmp_path, 1, seed=7, start=979)[0]
    settings = TaskSettings(design=design_loop_from_dict(lot_design()), limits=parse_limits(
        "[margins]\nmin_phase_margin_deg = 45\n[fit]\nmax_rms_db = 0.1\n"))
    row = run_task(path, settings)
    true = unit_sweep(7, 979, quantity="loop", noise=0.0, points=4001, f_min_hz=10, f_max_hz=1e6)
    gm, pm, _sm, _wpc, wgc, _wms = control.stability_margins(
        control.frd(true.response, 2 * np.pi * true.freq_hz))
    # 0.4 % complex noise gives about 0.035 dB rms at the noise floor (the lot's other
    # 999 units: 0.034..0.038 dB); 0.1 dB is a limit a production user would set.
    assert row["status"] == "pass", row
    assert row["fit_rms_db"] < 0.1
    assert row["phase_margin_deg"] == pytest.approx(pm, abs=0.1)
    assert row["gain_margin_db"] == pytest.approx(20 * np.log10(gm), abs=0.1)
    assert row["crossover_hz"] == pytest.approx(wgc / (2 * np.pi), rel=0.005)


# Regression: with the running noise σ of a 401-point sweep wandering down to about half the
# truth over some stretch, these units gave those points three to four times their weight
# and were fitted with a noise-chasing shape: 358, 414, 575, 867 with a pole pair and a
# right-half-plane zero pair above the band instead of the delay, 563 with a Q = 40
# pole/zero doublet near 39 kHz.  Truth: the generating model, 2 poles, 1 zero and 1 us
# (benchfit.batch.synth_lot); the noise is flat, 0.4 % complex per point.
@pytest.mark.parametrize("unit", [358, 414, 563, 575, 867])
def test_lot_units_with_an_unlucky_noise_stretch_keep_the_true_shape(unit):
    from benchfit.fitting import fit

    res = fit(unit_sweep(7, unit))
    assert res.stats["order"] == 2
    assert [p.name for p in res.parameters if p.name.startswith("zero")] == ["zero1_hz"]
    d = res.parameter("delay_s")
    assert abs(d.value - 1e-6) <= 3 * d.stderr, d
