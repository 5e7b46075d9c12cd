"""The stated load (--output-resistance, --load-cap, --load-esr) checked against the measured Aol.

References: the output pole of a source resistance Ro driving a capacitor CL is the RC
low-pass corner 1/(2π·Ro·CL) (handbook formula; with the capacitor's ESR in series the
corner of ZL/(Ro + ZL) is 1/(2π(Ro + ESR)CL) and its zero 1/(2π·ESR·CL)); the phase
margin of the isolation stage with the load the data show is checked against an
independent nodal analysis (KCL at the op-amp pin, the load node and V-, solved with
numpy.linalg.solve, the crossing found with scipy.optimize.brentq).
"""

import math
import re

import numpy as np
import pytest
from scipy.optimize import brentq

from benchfit.fitting.model import PlantModel
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.stage import design_stage, fitted_pole_sigma
from benchfit.loop.stage_load import STATED_LOAD_TOLERANCE, StageLoad, load_pole_evidence
from benchfit.loop.synthesis import Targets

A0, GBW, P2 = 1e5, 10e6, 30e6
W = 2 * np.pi


def opamp(s):
    return A0 / ((1 + s * A0 / (W * GBW)) * (1 + s / (W * P2)))


def aol_model(ro, cl, esr):
    """Aol = A·ZL/(Ro + ZL) of a two-pole op-amp, as a pole/zero model (rad/s)."""
    w1, w2 = W * GBW / A0, W * P2
    zeros = [-1 / (esr * cl)] if esr > 0 else []
    k = A0 * w1 * w2 * (esr / (ro + esr) if esr > 0 else 1 / ((ro + esr) * cl))
    return PlantModel(zeros=np.array(zeros, complex),
                      poles=np.array([-w1, -w2, -1 / ((ro + esr) * cl)], complex), k=k)


def test_output_pole_is_the_handbook_rc_corner():
    # handbook formula: an RC low-pass (source Ro into CL) has its -3 dB corner at 1/(2π·Ro·CL)
    for ro, cl in ((10.0, 10e-6), (2.0, 100e-6), (50.0, 1e-9)):
        ld = StageLoad(ro, cl, 0.0)
        tau = ro * cl
        f = brentq(lambda x, tau=tau: abs(1 / (1 + 1j * W * x * tau)) - 1 / math.sqrt(2), 1e-3, 1e12)
        assert ld.load_pole_hz() == pytest.approx(1 / (2 * math.pi * ro * cl), rel=1e-12)
        assert ld.load_pole_hz() == pytest.approx(f, rel=1e-9)
    # with ESR: the divider ZL/(Ro + ZL) solved at the node has its pole where Ro + ZL = 0
    ro, cl, esr = 10.0, 10e-6, 0.01
    ld = StageLoad(ro, cl, esr)
    s_pole = -1 / ((ro + esr) * cl)
    assert abs(ro + esr + 1 / (s_pole * cl)) < 1e-9
    assert ld.load_pole_hz() == pytest.approx(-s_pole / W)
    assert ld.esr_zero_hz() == pytest.approx(1 / (W * esr * cl))


@pytest.mark.parametrize("ro,cl,esr", [(10.0, 10e-6, 0.01), (2.0, 100e-6, 0.002), (4.0, 22e-6, 0.003)])
def test_rule_finds_the_load_the_data_show(ro, cl, esr):
    m = aol_model(ro, cl, esr)
    band = (10.0, 100e6)
    ok = load_pole_evidence(m, StageLoad(ro, cl, esr), band)
    assert ok.verdict == "consistent" and ok.message(StageLoad(ro, cl, esr)) is None
    # within the stated values' tolerance: still consistent
    assert load_pole_evidence(m, StageLoad(ro, cl * 1.2, esr), band).verdict == "consistent"
    for wrong in (cl * 10, cl / 10, 10.0):   # 10x off, and a 10 F the band cannot show
        ev = load_pole_evidence(m, StageLoad(ro, wrong, esr), band)
        assert ev.verdict == "contradicts"
        assert ev.data_pole_hz == pytest.approx(1 / (2 * math.pi * (ro + esr) * cl), rel=1e-9)
        assert ev.data_cap_f == pytest.approx(cl, rel=1e-9)
        msg = ev.message(StageLoad(ro, wrong, esr))
        assert "--load-cap" in msg and "--output-resistance" in msg


def test_rule_without_esr_and_outside_the_band():
    m = aol_model(10.0, 10e-6, 0.0)
    band = (10.0, 100e6)
    assert load_pole_evidence(m, StageLoad(10.0, 10e-6, 0.0), band).verdict == "consistent"
    ev = load_pole_evidence(m, StageLoad(10.0, 0.5e-6, 0.0), band)   # stated 31.8 kHz: no pole there
    assert ev.verdict == "not shown" and ev.data_cap_f is None
    assert ev.nearest_poles_hz == pytest.approx((1 / (W * 10.0 * 10e-6), P2))
    assert "31.8 kHz" in ev.message(StageLoad(10.0, 0.5e-6, 0.0))
    assert load_pole_evidence(m, StageLoad(10.0, 1.0, 0.0), band).verdict == "cannot tell"
    assert load_pole_evidence(m, StageLoad(0.0, 1e-6, 0.0), band) is None


def test_the_data_uncertainty_widens_the_agreement():
    m = aol_model(10.0, 10e-6, 0.0)
    band = (10.0, 100e6)
    off = (1 + STATED_LOAD_TOLERANCE) * 1.3   # 30 % beyond the stated tolerance
    assert load_pole_evidence(m, StageLoad(10.0, 10e-6 / off, 0.0), band).verdict == "not shown"
    wide = load_pole_evidence(m, StageLoad(10.0, 10e-6 / off, 0.0), band, lambda f: 0.1)
    assert wide.verdict == "consistent"


def nodal_iso_pm(parts, ro, cl, esr):
    """Smallest phase margin of the isolation stage, from its own node equations."""
    def t(f):
        s = 1j * W * f
        zl = esr + 1 / (s * cl)
        g = np.zeros((3, 3), complex)
        b = np.zeros(3, complex)

        def add(i, j, y):
            g[i, i] += y
            if j is not None:
                g[j, j] += y
                g[i, j] -= y
                g[j, i] -= y
        add(0, None, 1 / ro)
        b[0] = 1 / ro            # the internal source (1 V) through Ro into the pin
        add(0, 1, 1 / parts["Riso"])
        add(1, None, 1 / zl)
        add(1, 2, 1 / parts["Rf"])
        add(0, 2, s * parts["Cf"])
        add(2, None, 1 / parts["Rg"])
        return opamp(s) * np.linalg.solve(g, b)[2]
    f = np.logspace(1, 8, 20001)
    m = np.abs([t(x) for x in f])
    pms = []
    for i in np.where(np.diff(np.sign(m - 1)))[0]:
        fc = brentq(lambda x: abs(t(x)) - 1, f[i], f[i + 1])
        pms.append(180 + math.degrees(np.angle(t(fc))))
    return min(pms)


def test_isolation_design_with_a_wrong_load_cap_warns_with_the_real_margin():
    ro, cl, esr = 10.0, 10e-6, 0.01
    lp = LoopPlant(aol_model(ro, cl, esr), band_hz=(10.0, 100e6))
    d = design_stage(lp, "isolation", Targets(phase_margin_deg=55), gain=2,
                     load=StageLoad(ro, 100e-6, esr), series=("E96", "E12"), draws=0)
    [w] = [w for w in d.warnings if "--load-cap" in w]
    assert "1.59 kHz" in w and "159 Hz" in w and "10 µF" in w
    real = nodal_iso_pm(d.network.parts, ro, cl, esr)
    assert real < 20                       # the design's 55° is not what the circuit does
    assert f"would be {real:.1f}°" in w    # the warning quotes the nodal solution's margin
    assert d.provenance.settings["load_check"]["verdict"] == "contradicts"
    right = design_stage(lp, "isolation", Targets(phase_margin_deg=55), gain=2,
                         load=StageLoad(ro, cl, esr), series=("E96", "E12"), draws=0)
    assert not [w for w in right.warnings if "--load-cap" in w]
    assert nodal_iso_pm(right.network.parts, ro, cl, esr) == pytest.approx(
        min(right.snapped.corners[0].phase_margin_deg, right.snapped.corners[0].min_phase_margin_deg),
        abs=0.05)


def test_lag_lead_hardly_depends_on_the_stated_load():
    # the lag-lead network takes its loop from the measured Aol (load on); the stated CL only
    # changes how the feedback divider (kΩ) loads Ro, so even CL = 10 F moves the margin little,
    # and the warning says so in numbers
    ro, cl, esr = 10.0, 10e-6, 0.01
    lp = LoopPlant(aol_model(ro, cl, esr), band_hz=(10.0, 100e6))
    d = design_stage(lp, "lag-lead", Targets(phase_margin_deg=50), gain=2,
                     load=StageLoad(ro, 10.0, esr), series=("E96", "E12"), draws=0)
    [w] = [w for w in d.warnings if "--load-cap" in w]
    got = [float(x) for x in re.findall(r"(-?\d+\.\d)°", w)]
    assert len(got) == 2 and abs(got[0] - got[1]) < 0.5


def test_fitted_pole_sigma_reads_the_fit(tmp_path):
    from benchfit.loop.designfile import load_plant

    f = np.logspace(1, 8, 281)
    h = aol_model(10.0, 10e-6, 0.01).response(f)
    path = tmp_path / "aol.csv"
    path.write_text("Frequency (Hz),Gain (dB),Phase (deg)\n" + "".join(
        f"{a:.8g},{20 * np.log10(abs(x)):.6f},{np.degrees(np.angle(x)):.6f}\n" for a, x in zip(f, h, strict=True)))
    lp = load_plant(path)
    rel = fitted_pole_sigma(lp)
    assert rel is not None and 0 <= rel(1590.0) < 1e-3
    assert fitted_pole_sigma(LoopPlant(aol_model(10.0, 10e-6, 0.01))) is None
    ev = load_pole_evidence(lp.plant, StageLoad(10.0, 100e-6, 0.01), lp.band_hz, rel)
    assert ev.verdict == "contradicts" and ev.data_cap_f == pytest.approx(10e-6, rel=1e-3)
