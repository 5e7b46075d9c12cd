"""Touchstone v1 against scikit-rf's reading of the files it ships as data.

reference: scikit-rf's Touchstone reader (skrf.Network), on the Touchstone files
in the skrf.data package folder (a published open dataset carried by the
scikit-rf registry package).
"""

from pathlib import Path

import numpy as np
import pytest

skrf = pytest.importorskip("skrf")

from benchfit.data import read_sweep  # noqa: E402
from benchfit.data.touchstone import read_touchstone  # noqa: E402
from benchfit.errors import InputError  # noqa: E402

DATA = Path(skrf.data.__file__).parent
FILES = sorted(p for p in DATA.iterdir() if p.suffix.lower() in (".s1p", ".s2p", ".s3p"))


def _params(ports):
    return [(i, j) for i in range(ports) for j in range(ports)]


@pytest.mark.parametrize("path", FILES, ids=lambda p: p.name)
def test_every_parameter_matches_scikit_rf(path):
    ref = skrf.Network(str(path))
    ports = ref.nports
    assert len(FILES) >= 10
    for i, j in _params(ports):
        ours = read_sweep(path, param=f"S{i + 1}{j + 1}")
        # skrf keeps every point; ours sorts and would average repeats (none in these files)
        np.testing.assert_allclose(ours.freq_hz, ref.f, rtol=1e-12)
        np.testing.assert_allclose(ours.response, ref.s[:, i, j], rtol=1e-9, atol=1e-12)


def test_defaults_s21_for_two_port_s11_for_one_port():
    two = read_sweep(DATA / "ntwk1.s2p")
    assert two.meta["dialect"]["parameter"] == "S21"
    np.testing.assert_allclose(two.response, skrf.Network(str(DATA / "ntwk1.s2p")).s[:, 1, 0])
    one = read_sweep(DATA / "short.s1p")
    assert one.meta["dialect"]["parameter"] == "S11"
    assert one.meta["dialect"]["ports"] == 1


def test_lower_case_option_line_and_hz():
    # ind.s2p writes '# hz S ma R 50'
    r = read_sweep(DATA / "ind.s2p")
    assert r.meta["dialect"]["freq_unit"] == "Hz" and r.meta["dialect"]["data_form"] == "MA"


@pytest.mark.parametrize("fmt", ["RI", "MA", "DB"])
@pytest.mark.parametrize("unit,scale", [("Hz", 1.0), ("kHz", 1e3), ("MHz", 1e6), ("GHz", 1e9)])
def test_formats_and_units_against_scikit_rf(tmp_path, fmt, unit, scale):
    f = np.linspace(1, 5, 5)
    s11 = 0.5 * np.exp(1j * np.linspace(-3, 3, 5))
    s21 = 0.9 * np.exp(-1j * np.linspace(0.1, 2.9, 5))
    s12 = 0.01 * np.exp(1j * np.linspace(0.2, 0.4, 5))
    s22 = 0.3 * np.exp(1j * np.linspace(2, -2, 5))

    def pair(v):
        if fmt == "RI":
            return f"{v.real:.12e} {v.imag:.12e}"
        a = np.degrees(np.angle(v))
        m = abs(v) if fmt == "MA" else 20 * np.log10(abs(v))
        return f"{m:.12e} {a:.12e}"

    rows = [f"{fi:g} " + " ".join(pair(v[k]) for v in (s11, s21, s12, s22)) for k, fi in enumerate(f)]
    p = tmp_path / "gen.s2p"
    p.write_text(f"! generated\n# {unit} S {fmt} R 50\n" + "\n".join(rows) + "\n")
    ref = skrf.Network(str(p))
    for name, (i, j), truth in (("S11", (0, 0), s11), ("S21", (1, 0), s21), ("S12", (0, 1), s12),
                                ("S22", (1, 1), s22)):
        ours = read_sweep(p, param=name)
        np.testing.assert_allclose(ours.freq_hz, f * scale, rtol=1e-12)
        np.testing.assert_allclose(ours.freq_hz, ref.f, rtol=1e-12)
        np.testing.assert_allclose(ours.response, ref.s[:, i, j], rtol=1e-9)
        np.testing.assert_allclose(ours.response, truth, rtol=1e-9)


def test_z_parameters_are_denormalised_like_scikit_rf(tmp_path):
    # Touchstone v1 stores Z normalised to R; scikit-rf's .z gives ohms.
    p = tmp_path / "z.s1p"
    p.write_text("# kHz Z RI R 50\n1 0.02 0.001\n2 0.021 0.004\n3 0.03 0.02\n")
    ours = read_sweep(p)
    ref = skrf.Network(str(p))
    np.testing.assert_allclose(ours.response, ref.z[:, 0, 0], rtol=1e-9)
    assert ours.quantity == "impedance"


def test_noise_parameters_at_the_end_are_skipped(tmp_path):
    p = tmp_path / "noisy.s2p"
    body = "".join(f"{f} 0.1 10 2.0 -20 0.01 5 0.2 -30\n" for f in (1, 2, 3))
    noise = "! noise parameters\n1 1.5 0.3 40 0.5\n2 1.7 0.35 45 0.55\n"
    p.write_text("# GHz S MA R 50\n" + body + noise)
    ours = read_sweep(p)
    ref = skrf.Network(str(p))
    assert len(ours) == 3
    np.testing.assert_allclose(ours.response, ref.s[:, 1, 0], rtol=1e-9)


def test_port_count_inferred_without_extension():
    text = (DATA / "ntwk1.s2p").read_text()
    ts = read_touchstone(text, "ntwk1 (no name)")
    assert ts.ports == 2 and ts.param == "S21"


def test_only_the_first_option_line_counts():
    ts = read_touchstone("# Hz S RI R 50\n1 1 0\n# GHz S DB\n2 1 0\n", "x", ports=1)
    np.testing.assert_allclose(ts.freq_hz, [1, 2])
    np.testing.assert_allclose(ts.values, [1, 1])


def test_unknown_port_count_is_an_error():
    with pytest.raises(InputError, match="port count") as e:
        read_touchstone("# Hz S RI R 50\n1 2 3 4 5\n", "odd")
    assert e.value.line == 2
