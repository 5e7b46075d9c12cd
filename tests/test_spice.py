"""SPICE export: the netlist's own AC response, solved here independently, equals the model.

The check does not trust the exporter's algebra: a small modified-nodal-analysis
(MNA) solver below parses the netlist text (R, C, G, E, T and V elements, one
level of subcircuit) and solves the circuit at each frequency with numpy.  The
element equations are the textbook ones (stamps as in Ho, Ruehli and Brennan,
"The modified nodal approach to network analysis", IEEE Trans. Circuits and
Systems 22(6), 1975); the lossless line uses the characteristic (Branin) form
V1 − Z0·I1 = e^{−sT}(V2 + Z0·I2) and vice versa, which is the SPICE3 T element's
definition (Branin, "Transient analysis of lossless transmission lines",
Proc. IEEE 55(11), 1967).  Tolerance 0.1 dB / 1° as the issue asks.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.output.spice import spice_subcircuit, write_spice

W = 2 * np.pi


def _value(text: str) -> float:
    suffix = {"f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "k": 1e3, "meg": 1e6, "g": 1e9}
    t = text.lower()
    for s in ("meg", "f", "p", "n", "u", "m", "k", "g"):
        if t.endswith(s) and not t.endswith("e" + s):
            try:
                return float(t[: -len(s)]) * suffix[s]
            except ValueError:
                pass
    return float(t)


def _parse(text: str) -> tuple[dict[str, tuple[list[str], list[str]]], list[list[str]]]:
    """-> (subcircuits {name: (ports, element lines)}, top-level element lines)."""
    lines: list[str] = []
    for raw in text.splitlines():
        s = raw.strip()
        if not s or s.startswith("*"):
            continue
        if s.startswith("+"):
            lines[-1] += " " + s[1:]
        else:
            lines.append(s)
    subs: dict[str, tuple[list[str], list[str]]] = {}
    top: list[list[str]] = []
    cur = None
    for s in lines:
        tok = s.split()
        key = tok[0].lower()
        if key == ".subckt":
            cur = tok[1].lower()
            subs[cur] = (tok[2:], [])
        elif key == ".ends":
            cur = None
        elif key.startswith("."):
            continue
        elif cur is not None:
            subs[cur][1].append(tok)
        else:
            top.append(tok)
    return subs, top


def _flatten(subs, top):
    flat = []
    for tok in top:
        if tok[0][0].lower() == "x":
            ports, body = subs[tok[-1].lower()]
            mapping = dict(zip(ports, tok[1:-1], strict=True))
            mapping["0"] = "0"
            for el in body:
                kind = el[0][0].lower()
                nn = {"r": 2, "c": 2, "v": 2, "g": 4, "e": 4, "t": 4}[kind]
                nodes = [mapping.get(n, f"{tok[0]}.{n}") for n in el[1:1 + nn]]
                flat.append([f"{tok[0]}.{el[0]}", *nodes, *el[1 + nn:]])
        else:
            flat.append(tok)
    return flat


def _stamps(parsed, n: int, s: complex):
    """(row, column, value) entries of the MNA matrix; index -1 is ground (dropped)."""
    out = []
    for p in parsed:
        kind = p[0]
        if kind in "rc":
            _, a, c, val = p
            y = 1.0 / val if kind == "r" else s * val
            out += [(a, a, y), (c, c, y), (a, c, -y), (c, a, -y)]
        elif kind == "g":  # current gm*(Vc+ - Vc-) flows from n+ through the source to n-
            _, np_, nm, cp, cm, gm = p
            out += [(np_, cp, gm), (np_, cm, -gm), (nm, cp, -gm), (nm, cm, gm)]
        elif kind in "ev":  # branch current k; V(n+) - V(n-) = gain (Vc+ - Vc-)  or  = AC value
            np_, nm = p[1], p[2]
            k = n + p[-1]
            out += [(np_, k, 1), (nm, k, -1), (k, np_, 1), (k, nm, -1)]
            if kind == "e":
                _, _, _, cp, cm, gain, _ = p
                out += [(k, cp, -gain), (k, cm, gain)]
        elif kind == "t":
            _, a1, a2, b1, b2, z0, td, br = p
            k1, k2 = n + br, n + br + 1   # currents into the line at port 1 and port 2
            d = np.exp(-s * td)
            out += [(a1, k1, 1), (a2, k1, -1), (b1, k2, 1), (b2, k2, -1),
                    # V1 - Z0 I1 - d (V2 + Z0 I2) = 0
                    (k1, a1, 1), (k1, a2, -1), (k1, k1, -z0), (k1, b1, -d), (k1, b2, d), (k1, k2, -d * z0),
                    # V2 - Z0 I2 - d (V1 + Z0 I1) = 0
                    (k2, b1, 1), (k2, b2, -1), (k2, k2, -z0), (k2, a1, -d), (k2, a2, d), (k2, k1, -d * z0)]
    return out


def mna_ac(netlist: str, freq_hz: np.ndarray, probe: str) -> np.ndarray:
    """AC voltage at node ``probe`` for every frequency (all V sources are the AC stimuli)."""
    subs, top = _parse(netlist)
    els = _flatten(subs, top)
    nodes: dict[str, int] = {}

    def idx(n: str) -> int:
        if n == "0":
            return -1
        return nodes.setdefault(n, len(nodes))

    branches = 0
    parsed = []
    for el in els:
        kind = el[0].split(".")[-1][0].lower()
        if kind in "rc":
            parsed.append((kind, idx(el[1]), idx(el[2]), _value(el[3])))
        elif kind == "g":
            parsed.append((kind, idx(el[1]), idx(el[2]), idx(el[3]), idx(el[4]), _value(el[5])))
        elif kind == "e":
            parsed.append((kind, idx(el[1]), idx(el[2]), idx(el[3]), idx(el[4]), _value(el[5]), branches))
            branches += 1
        elif kind == "v":
            ac = _value(el[el.index("AC") + 1]) if "AC" in el else 0.0
            parsed.append((kind, idx(el[1]), idx(el[2]), ac, branches))
            branches += 1
        elif kind == "t":
            kw = {k.lower(): _value(v) for k, v in (x.split("=") for x in el[5:])}
            parsed.append((kind, idx(el[1]), idx(el[2]), idx(el[3]), idx(el[4]), kw["z0"], kw["td"], branches))
            branches += 2
        else:
            raise AssertionError(f"element {el[0]} is not one of R C G E T V")
    n = len(nodes)
    size = n + branches
    out = np.empty(len(freq_hz), dtype=complex)
    for fi, f in enumerate(freq_hz):
        s = 2j * np.pi * f
        A = np.zeros((size, size), dtype=complex)
        b = np.zeros(size, dtype=complex)
        for entry in _stamps(parsed, n, s):
            i, j, v = entry
            if i >= 0 and j >= 0:
                A[i, j] += v
        for p in parsed:
            if p[0] == "v":
                b[n + p[4]] = p[3]
        x = np.linalg.solve(A, b)
        out[fi] = x[nodes[probe]]
    return out


def _harness(sub: str, name: str = "plant") -> str:
    return sub + f"V1 drive 0 AC 1\nX1 drive y {name}\nRload y 0 1k\n"


def _assert_matches(model: PlantModel, f: np.ndarray) -> None:
    net = _harness(spice_subcircuit(model))
    h_net = mna_ac(net, f, "y")
    h_ref = model.response(f)
    db = 20 * np.log10(np.abs(h_net) / np.abs(h_ref))
    deg = np.degrees(np.angle(h_net / h_ref))
    assert np.max(np.abs(db)) < 0.1, f"worst {np.max(np.abs(db)):.3g} dB"
    assert np.max(np.abs(deg)) < 1.0, f"worst {np.max(np.abs(deg)):.3g} deg"


F = np.logspace(0, 7, 141)


def test_buck_like_plant_with_esr_zero_and_lc_pair():
    # Control-to-output of a buck: double pole at the LC corner (Q 2), ESR zero.
    w0, q, wz = W * 3e3, 2.0, W * 40e3
    m = PlantModel(zeros=[-wz], poles=np.roots([1, w0 / q, w0 ** 2]), k=12.0 * w0 ** 2 / wz)
    _assert_matches(m, F)


def test_integrator_rhp_zero_and_real_poles():
    # Boost-like: RHP zero, an integrator and three real poles; odd count -> a 1st-order section.
    m = PlantModel(zeros=[W * 20e3, -W * 500], poles=[0.0, -W * 50, -W * 2e3, -W * 300e3], k=3e9)
    _assert_matches(m, F)


def test_complex_zeros_over_real_poles_and_repeated_poles():
    # Complex zeros need a 2nd-order section even though every pole is real; a repeated pole.
    zc = np.roots([1, W * 1e3 / 5, (W * 1e3) ** 2])
    m = PlantModel(zeros=zc, poles=[-W * 100, -W * 100, -W * 1e4], k=7.0)
    _assert_matches(m, F)


def test_delay_through_matched_line():
    # exp(-s tau) must come out of the T line: 2 us at 100 kHz is 72 degrees.
    m = PlantModel(zeros=[], poles=np.roots([1, W * 1e4 / 0.7, (W * 1e4) ** 2]), k=(W * 1e4) ** 2,
                   delay_s=2e-6)
    _assert_matches(m, np.logspace(1, 5.5, 91))


def test_equal_zero_and_pole_count_gives_direct_term():
    # A lead network (s + 1k)/(s + 10k) * 10 has a direct feed-through D = 10.
    m = PlantModel(zeros=[-W * 1e3], poles=[-W * 1e4], k=10.0)
    _assert_matches(m, F)


def test_matches_scipy_freqs_zpk():
    # Cross-check the netlist against scipy.signal.freqs_zpk (reference library) on a random model.
    rng = np.random.default_rng(3)
    poles = np.concatenate([-W * 10 ** rng.uniform(1, 5, 3),
                            np.roots([1, W * 2e4 / 3, (W * 2e4) ** 2])])
    zeros = -W * 10 ** rng.uniform(2, 6, 2)
    m = PlantModel(zeros=zeros, poles=poles, k=1e12)
    _, h_ref = signal.freqs_zpk(zeros, poles, 1e12, worN=W * F)
    h_net = mna_ac(_harness(spice_subcircuit(m)), F, "y")
    np.testing.assert_allclose(h_net, h_ref, rtol=0.01)


def test_only_standard_elements_and_ports():
    m = PlantModel(zeros=[-W * 1e3], poles=[0.0, -W * 1e4, -W * 1e5], k=1e6, delay_s=1e-6)
    text = spice_subcircuit(m, "buck_ctl")
    body = [ln for ln in text.splitlines() if ln and not ln.startswith("*")]
    assert body[0] == ".SUBCKT buck_ctl in out" and body[-1] == ".ENDS buck_ctl"
    assert {ln[0] for ln in body[1:-1]} <= set("RCGET")


def test_rejects_improper_model_and_bad_name(tmp_path):
    with pytest.raises(InputError, match="at least as many poles"):
        spice_subcircuit(PlantModel(zeros=[-1.0, -2.0], poles=[-3.0], k=1.0))
    with pytest.raises(InputError, match="subcircuit name"):
        spice_subcircuit(PlantModel(zeros=[], poles=[-3.0], k=1.0), "1 bad\nname")


def test_newline_in_source_name_cannot_inject_an_element(tmp_path):
    from benchfit.provenance import Provenance

    m = PlantModel(zeros=[], poles=[-10.0], k=10.0,
                   provenance=Provenance(step="fit", sources=("a.csv\nV9 in 0 AC 100",)))
    p = write_spice(m, tmp_path / "p.cir")
    text = p.read_text()
    assert not any(ln.startswith("V9") for ln in text.splitlines())
    _assert_matches(m, np.logspace(-1, 3, 20))


def test_cli_export_spice(tmp_path, capsys):
    from benchfit.cli import main

    m = PlantModel(zeros=[-W * 4e4], poles=np.roots([1, W * 3e3 / 2, (W * 3e3) ** 2]), k=1e5)
    m.to_json(tmp_path / "m.json")
    out = tmp_path / "p.cir"
    assert main(["export-spice", str(tmp_path / "m.json"), "-o", str(out), "--name", "buck"]) == 0
    assert "SUBCKT buck" in capsys.readouterr().out
    h = mna_ac(out.read_text() + "V1 a 0 AC 1\nX1 a y buck\n", F, "y")
    np.testing.assert_allclose(h, m.response(F), rtol=1e-3)
    (tmp_path / "bad.json").write_text('{"kind": "design", "plant": {"freq_hz": [1, 2]}}')
    assert main(["export-spice", str(tmp_path / "bad.json"), "-o", str(out)]) == 2
    assert "measured data, not a model" in capsys.readouterr().err


def test_design_compensator_export_matches_the_part_values(tmp_path):
    # The exported compensator, solved as a circuit, must equal the network computed from its
    # R and C values (benchfit.loop.networks), which its own tests check against nodal analysis.
    from benchfit.cli import main
    from benchfit.loop.design import design
    from benchfit.loop.loopgain import LoopPlant
    from benchfit.loop.opamp import OpAmp
    from benchfit.loop.synthesis import Targets

    w0, q = W * 5e3, 2.0
    plant = PlantModel(zeros=[-W * 80e3], poles=np.roots([1, w0 / q, w0 ** 2]), k=12.0 * w0 ** 2 / (W * 80e3))
    opamp = OpAmp(10e6)
    d = design(LoopPlant(plant), "type3", Targets(crossover_hz=20e3, phase_margin_deg=50), opamp=opamp, draws=0)
    d.to_json(tmp_path / "d.json")
    out = tmp_path / "comp.cir"
    assert main(["export-spice", str(tmp_path / "d.json"), "--part", "compensator", "-o", str(out)]) == 0
    f = np.logspace(1, 6.5, 60)
    h = mna_ac(out.read_text() + "V1 a 0 AC 1\nX1 a y compensator\n", f, "y")
    ref = d.snapped.network.response(f, opamp)
    assert np.max(np.abs(20 * np.log10(np.abs(h / ref)))) < 0.1
    assert np.max(np.abs(np.degrees(np.angle(h / ref)))) < 1.0
