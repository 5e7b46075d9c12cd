"""Stage networks (op-amp + capacitive load) against an independent nodal analysis.

Reference: modified nodal analysis of the whole circuit, written here
independently of benchfit's Cramer-rule solver: Kirchhoff's current law at
every node, the signal source and the op-amp as voltage sources (the op-amp
as a voltage-controlled voltage source V_x = A(s)·(V+ − V−) behind its
output resistance), solved with numpy.linalg.solve at each frequency —
textbook circuit analysis.  The return ratio is found the textbook way too:
the controlled source is replaced by an independent 1 V source and
T = −(what the controlled source would return).
"""

import zlib

import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.loop.stage_load import StageLoad
from benchfit.loop.stage_networks import PARTS, StageNetwork

NODES = ["x", "o", "l", "n", "i", "j"]  # j: the lag's or snubber's inner node


def elements(net: StageNetwork):
    """(name, node, node, kind, value) of every component; nodes as in NODES plus '0'."""
    p, ld = net.parts, net.load
    ro = ld.ro_ohm if ld.ro_ohm > 0 else 1e-9  # an ideal output as a 1 nΩ resistor
    pin = "o" if net.kind == "isolation" else "l"  # without Riso the op-amp pin is the load node
    el = [("Ro", "x", pin, "R", ro)]
    if net.kind == "isolation":
        el.append(("Riso", "o", "l", "R", p["Riso"]))
        el.append(("Cf", "o", "n", "C", p["Cf"]))
    if ld.c_f is not None and ld.ro_ohm > 0:
        el.append(("CL", "l", "k", "C", ld.c_f))
        el.append(("ESR", "k", "0", "R", max(ld.esr_ohm, 1e-12)))
    el.append(("Rf", "l", "n", "R", p["Rf"]))
    if "Rg" in p:
        el.append(("Rg", "n", "0" if net.stage == "noninverting" else "i", "R", p["Rg"]))
    if net.kind in ("lead", "lag-lead"):
        el.append(("Cf", "l", "n", "C", p["Cf"]))
    if net.kind in ("lag", "lag-lead"):
        end = "i" if (net.lag_at == "across" and net.stage == "noninverting") else "0"
        el.append(("Rn", "n", "j", "R", p["Rn"]))
        el.append(("Cn", "j", end, "C", p["Cn"]))
    if net.kind == "snubber":
        el.append(("Rs", "l", "j", "R", p["Rs"]))
        el.append(("Cs", "j", "0", "C", p["Cs"]))
    return el


def mna(net, f, a_of_s, vin=1.0, break_loop=False, inject=0.0, short_load=False):
    """Node voltages by MNA.  a_of_s: op-amp internal gain A(s).  break_loop: V_x = 1 V
    independent.  inject: current (A) into the load node.  short_load: load node at 0 V."""
    nodes = NODES + ["k"]
    idx = {n: i for i, n in enumerate(nodes)}
    s = 2j * np.pi * f
    n = len(nodes)
    nsrc = 3 if short_load else 2
    M = np.zeros((n + nsrc, n + nsrc), dtype=complex)
    b = np.zeros(n + nsrc, dtype=complex)
    for _, a, c, kind, val in elements(net):
        y = 1 / val if kind == "R" else s * val
        for u, w in ((a, c), (c, a)):
            if u != "0":
                M[idx[u], idx[u]] += y
                if w != "0":
                    M[idx[u], idx[w]] -= y
    for node in nodes:  # nodes with nothing attached: pin them at 0 V
        if M[idx[node], idx[node]] == 0:
            M[idx[node], idx[node]] = 1
    b[idx["l"]] += inject
    # source 0: signal V_i; source 1: op-amp V_x; source 2: load short
    srcs = [("i", None), ("x", None)] + ([("l", None)] if short_load else [])
    for k, (node, _) in enumerate(srcs):
        M[idx[node], n + k] += 1  # source current leaves into the node
        M[n + k, idx[node]] = 1
    b[n] = vin
    if break_loop:
        b[n + 1] = 1.0
    else:
        a = a_of_s(s)
        vp = "i" if net.stage == "noninverting" else None
        if vp:
            M[n + 1, idx[vp]] -= a
        M[n + 1, idx["n"]] += a
    if short_load:
        b[n + 2] = 0.0
    v = np.linalg.solve(M, b)
    return {node: v[idx[node]] for node in nodes}


def aol_of(net, f, a_of_s):
    """Measured Aol: A·ZL/(Ro+ZL), the divider written out by hand."""
    s = 2j * np.pi * f
    ld = net.load
    if not (ld.ro_ohm > 0 and ld.c_f is not None):
        return a_of_s(s)
    zl = ld.esr_ohm + 1 / (s * ld.c_f)
    return a_of_s(s) * zl / (ld.ro_ohm + zl)


def opamp(gbw, a0=1e5, p2=None):
    w1 = 2 * np.pi * gbw / a0
    w2 = 2 * np.pi * (p2 or 3 * gbw)
    return lambda s: a0 / ((1 + s / w1) * (1 + s / w2))


def random_net(kind, stage, rng, lag_at="across"):
    gain = rng.uniform(1.5, 10)
    rg = 10 ** rng.uniform(3, 4.5)
    parts = {"Rf": rg * (gain - 1 if stage == "noninverting" else gain), "Rg": rg}
    for n in PARTS[kind]:
        if n == "Cf":
            parts[n] = 10 ** rng.uniform(-12, -9)
        elif n in ("Rn", "Rs", "Riso"):
            parts[n] = 10 ** rng.uniform(0, 3.5)
        elif n == "Cn":
            parts[n] = 10 ** rng.uniform(-10, -7)
        elif n == "Cs":
            parts[n] = 10 ** rng.uniform(-7, -5)
    load = StageLoad(ro_ohm=10 ** rng.uniform(0, 2), c_f=10 ** rng.uniform(-9, -5),
                     esr_ohm=10 ** rng.uniform(-3, 0))
    return StageNetwork(kind, parts, stage=stage, load=load, lag_at=lag_at)


CASES = [(k, st, at) for k in PARTS for st in ("noninverting", "inverting")
         for at in (("across", "ground") if "lag" in k else ("across",))]


@pytest.mark.parametrize("kind,stage,lag_at", CASES)
def test_return_ratio_matches_nodal_analysis(kind, stage, lag_at):
    rng = np.random.default_rng(zlib.crc32(f"{kind}{stage}{lag_at}".encode()))
    a = opamp(10 ** rng.uniform(5, 8))
    for _ in range(3):
        net = random_net(kind, stage, rng, lag_at)
        f = np.logspace(1, 8, 29)
        comp = net.response(f)
        model = net.model().response(f)
        t_ref = []
        for fk in f:
            v = mna(net, fk, a, vin=0.0, break_loop=True)
            vp = v["i"] if stage == "noninverting" else 0.0
            t_ref.append(-(a(2j * np.pi * fk) * (vp - v["n"])))  # T = −returned/injected
        t_ref = np.array(t_ref)
        t = aol_of(net, f, a) * comp
        np.testing.assert_allclose(t, t_ref, rtol=1e-6)
        np.testing.assert_allclose(model, comp, rtol=1e-6)


@pytest.mark.parametrize("kind,stage,lag_at", CASES)
def test_closed_loop_and_output_impedance_match_nodal_analysis(kind, stage, lag_at):
    rng = np.random.default_rng(7 + zlib.crc32(f"{kind}{stage}{lag_at}".encode()))
    a = opamp(10 ** rng.uniform(5, 8))
    net = random_net(kind, stage, rng, lag_at)
    f = np.logspace(1, 8, 23)
    s = 2j * np.pi * f
    A = a(s)
    T = aol_of(net, f, a) * net.response(f)
    p = 1.0 if stage == "noninverting" else 0.0
    g = net.at(f, "k_x") * A * (p - net.at(f, "h_in")) / (1 + T) + net.at(f, "k_in")
    g_ref = np.array([mna(net, fk, a)["l"] for fk in f])
    np.testing.assert_allclose(g, g_ref, rtol=1e-6, atol=1e-12)
    # Blackman's impedance formula Z = Z_ol (1 + T_sc)/(1 + T_oc)
    # (Blackman 1943; T_sc: the return ratio with the port shorted)
    z = net.at(f, "z_ol") * (1 + A * net.at(f, "h_sc")) / (1 + T)
    z_ref = np.array([mna(net, fk, a, vin=0.0, inject=1.0)["l"] for fk in f])
    np.testing.assert_allclose(z, z_ref, rtol=1e-5, atol=1e-12)


def test_plain_stage_is_the_resistive_divider():
    net = StageNetwork("plain", {"Rf": 15e3, "Rg": 10e3})
    # β = Rg/(Rf+Rg) (the non-inverting stage's feedback factor; any op-amp text)
    np.testing.assert_allclose(net.response(np.array([1.0, 1e6])), 10 / 25)
    assert net.ideal_gain() == pytest.approx(2.5)
    inv = StageNetwork("plain", {"Rf": 15e3, "Rg": 10e3}, stage="inverting")
    assert inv.ideal_gain() == pytest.approx(-1.5)


def test_monte_carlo_values_broadcast():
    rng = np.random.default_rng(3)
    net = random_net("lag-lead", "noninverting", rng)
    f = np.logspace(2, 7, 11)
    vals = {n: net.parts[n] * np.array([[0.9], [1.0], [1.1]]) for n in net.parts}
    out = net.response(f, None, vals)
    assert out.shape == (3, f.size)
    np.testing.assert_allclose(out[1], net.response(f), rtol=1e-12)
    one = net.with_parts({n: v[2, 0] for n, v in vals.items()}).response(f)
    np.testing.assert_allclose(out[2], one, rtol=1e-12)


def test_user_mistakes_are_input_errors():
    with pytest.raises(InputError, match="needs the op-amp's output"):
        StageNetwork("isolation", {"Rf": 1e4, "Rg": 1e4, "Cf": 1e-10, "Riso": 10})
    with pytest.raises(InputError, match="missing"):
        StageNetwork("lead", {"Rf": 1e4, "Rg": 1e4})
    with pytest.raises(InputError, match="unknown"):
        StageNetwork("bogus", {"Rf": 1e4})
    with pytest.raises(InputError, match="> 0"):
        StageNetwork("plain", {"Rf": -1.0, "Rg": 1e4})


def test_cancel_pair_only_cancels_a_matching_zero():
    from benchfit.loop.nodal import cancel_pair

    poles: list = []
    assert cancel_pair([-1.0, -1e6 * (1 + 1e-7)], -1e6, poles) == [-1.0] and poles == []
    poles = []
    assert cancel_pair([-1.0, -2e6], -1e6, poles) == [-1.0, -2e6] and poles == [-1e6]
    # a capacitor without ESR: the model has no extra pole and still matches the values
    net = StageNetwork("lead", {"Rf": 1e4, "Rg": 1e4, "Cf": 1e-10},
                       load=StageLoad(ro_ohm=20.0, c_f=1e-6, esr_ohm=0.0))
    f = np.logspace(1, 7, 13)
    np.testing.assert_allclose(net.model().response(f), net.response(f), rtol=1e-8)
