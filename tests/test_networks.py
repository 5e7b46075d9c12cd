"""Network transfer functions against an independent nodal analysis.

Reference: modified nodal analysis of the component circuit (Kirchhoff's
current law at every node, op-amp as an ideal virtual-ground constraint or
as a voltage-controlled voltage source Vout = −A(s)·V−), solved with
numpy.linalg at each frequency — textbook circuit analysis, written here
independently of benchfit's impedance algebra.
"""

import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.loop.networks import PARTS, Network
from benchfit.loop.opamp import OpAmp
from benchfit.loop.sensing import Sensing

# node numbers: 0 ground, 1 input, 2 inverting input, 3 output, 4 R2–C1 joint, 5 R3–C3 joint
TOPOLOGY = {
    "type1": [("C1", 2, 3)] + [("R1", 1, 2)],
    "pi": [("R1", 1, 2), ("R2", 2, 4), ("C1", 4, 3)],
    "type2": [("R1", 1, 2), ("R2", 2, 4), ("C1", 4, 3), ("C2", 2, 3)],
    "type3": [("R1", 1, 2), ("R3", 1, 5), ("C3", 5, 2), ("R2", 2, 4), ("C1", 4, 3), ("C2", 2, 3)],
}


def nodal_gain(kind, parts, freq_hz, a_of_s=None):
    """Vout/Vin of the inverting stage by nodal analysis; a_of_s None = ideal op-amp."""
    used = sorted({n for _, i, j in TOPOLOGY[kind] for n in (i, j)} - {0, 1})
    col = {node: k for k, node in enumerate(used)}  # unknown node voltages (V1 = 1 V drives)
    out = []
    for f in np.atleast_1d(freq_hz):
        s = 2j * np.pi * f
        Y = np.zeros((6, 6), dtype=complex)
        for name, i, j in TOPOLOGY[kind]:
            y = 1 / parts[name] if name[0] == "R" else s * parts[name]
            Y[i, i] += y
            Y[j, j] += y
            Y[i, j] -= y
            Y[j, i] -= y
        rows, rhs = [], []
        for node in used:
            if node == 3:
                continue  # the amplifier drives the output node: no KCL there
            rows.append(Y[node, used])
            rhs.append(-Y[node, 1] * 1.0)
        row = np.zeros(len(used), dtype=complex)
        if a_of_s is None:
            row[col[2]] = 1  # ideal: V− = 0
        else:
            row[col[2]] = a_of_s(s)  # VCVS: Vout = A·(0 − V−)
            row[col[3]] = 1
        rows.append(row)
        rhs.append(0.0)
        v = np.linalg.solve(np.array(rows), np.array(rhs, dtype=complex))
        out.append(v[col[3]])
    return np.array(out)


def random_parts(kind, rng):
    vals = {}
    for n in PARTS[kind]:
        vals[n] = 10 ** rng.uniform(2.5, 5.5) if n[0] == "R" else 10 ** rng.uniform(-11, -7)
    return vals


def opamp_a(op):
    a0 = op.dc_gain
    w1 = 2 * np.pi * op.gbw_hz / a0
    w2 = None if op.second_pole_hz is None else 2 * np.pi * op.second_pole_hz
    return lambda s: a0 / (1 + s / w1) / (1 if w2 is None else (1 + s / w2))


@pytest.mark.parametrize("kind", list(PARTS))
@pytest.mark.parametrize("seed", range(6))
def test_ideal_stage_matches_nodal_analysis(kind, seed):
    rng = np.random.default_rng(seed)
    parts = random_parts(kind, rng)
    net = Network(kind, parts)
    f = np.logspace(0, 7, 41)
    ref = nodal_gain(kind, parts, f)
    # the stage inverts; benchfit's compensator folds that −1 into the loop sign
    np.testing.assert_allclose(-net.response(f), ref, rtol=1e-9)
    np.testing.assert_allclose(-net.model().response(f), ref, rtol=1e-6)


@pytest.mark.parametrize("kind", list(PARTS))
@pytest.mark.parametrize("seed", range(4))
def test_finite_opamp_stage_matches_nodal_vcvs(kind, seed):
    rng = np.random.default_rng(100 + seed)
    parts = random_parts(kind, rng)
    op = OpAmp(gbw_hz=10 ** rng.uniform(5, 7), dc_gain_db=rng.uniform(60, 120),
               second_pole_hz=None if seed % 2 else 10 ** rng.uniform(7, 8))
    net = Network(kind, parts)
    f = np.logspace(0, 7.5, 41)
    ref = nodal_gain(kind, parts, f, opamp_a(op))
    np.testing.assert_allclose(-net.response(f, op), ref, rtol=1e-9)
    np.testing.assert_allclose(-net.model(op).response(f), ref, rtol=1e-6)


def test_type2_corners_follow_textbook_formulas():
    # zero 1/(2π R2 C1), pole 1/(2π R2 C1C2/(C1+C2)), integrator 1/(2π R1 (C1+C2)):
    # standard lag-lead analysis (any power-supply control textbook).
    p = {"R1": 10e3, "R2": 47e3, "C1": 3.3e-9, "C2": 100e-12}
    n = Network("type2", p)
    c = n.corners_hz()
    assert c["zeros_hz"][0] == pytest.approx(1 / (2 * np.pi * 47e3 * 3.3e-9), rel=1e-9)
    cs = 3.3e-9 * 100e-12 / (3.3e-9 + 100e-12)
    assert c["poles_hz"][0] == pytest.approx(1 / (2 * np.pi * 47e3 * cs), rel=1e-9)
    assert n.integrator_hz() == pytest.approx(1 / (2 * np.pi * 10e3 * 3.4e-9), rel=1e-12)


def test_pi_gain_floor_is_r2_over_r1():
    n = Network("pi", {"R1": 1e3, "R2": 22e3, "C1": 10e-9})
    assert abs(n.response(np.array([1e8]))[0]) == pytest.approx(22.0, rel=1e-6)


def test_type3_corners():
    p = {"R1": 10e3, "R2": 20e3, "R3": 500, "C1": 10e-9, "C2": 470e-12, "C3": 2.2e-9}
    c = Network("type3", p).corners_hz()
    expect_z = sorted([1 / (2 * np.pi * 20e3 * 10e-9), 1 / (2 * np.pi * 10.5e3 * 2.2e-9)])
    expect_p = sorted([1 / (2 * np.pi * 20e3 * (10e-9 * 470e-12 / 10.47e-9)),
                       1 / (2 * np.pi * 500 * 2.2e-9)])
    np.testing.assert_allclose(c["zeros_hz"], expect_z, rtol=1e-9)
    np.testing.assert_allclose(c["poles_hz"], expect_p, rtol=1e-9)


def test_monte_carlo_values_broadcast():
    n = Network("type2", {"R1": 10e3, "R2": 47e3, "C1": 3.3e-9, "C2": 100e-12})
    f = np.logspace(2, 6, 7)
    draws = {"R2": np.array([[47e3], [50e3]])}
    h = n.response(f, values=draws)
    assert h.shape == (2, 7)
    np.testing.assert_allclose(h[0], n.response(f), rtol=1e-12)
    n2 = Network("type2", {"R1": 10e3, "R2": 50e3, "C1": 3.3e-9, "C2": 100e-12})
    np.testing.assert_allclose(h[1], n2.response(f), rtol=1e-12)


def test_bad_parts_raise_input_error():
    with pytest.raises(InputError, match="C2"):
        Network("type2", {"R1": 1e3, "R2": 1e3, "C1": 1e-9})
    with pytest.raises(InputError, match="R1"):
        Network("type1", {"R1": -5, "C1": 1e-9})
    with pytest.raises(InputError, match="network"):
        Network("type9", {})


def test_network_round_trip():
    n = Network("type3", {"R1": 10e3, "R2": 20e3, "R3": 500, "C1": 10e-9, "C2": 470e-12, "C3": 2.2e-9})
    assert Network.from_dict(n.to_dict()).parts == n.parts


def test_divider_gain():
    s = Sensing.divider(30e3, 10e3)
    assert s.gain == pytest.approx(0.25)
    assert Sensing.from_dict(s.to_dict()).gain == pytest.approx(0.25)
    with pytest.raises(InputError):
        Sensing(r_top=1e3)
