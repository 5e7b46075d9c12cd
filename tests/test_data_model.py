"""FrequencyResponse / TimeTrace / PlantModel: validation, views, JSON round trip."""

import numpy as np
import pytest
from scipy import signal

from benchfit.data import (
    FrequencyResponse,
    TimeTrace,
    read_canonical_sweep,
    read_canonical_trace,
    write_sweep_csv,
    write_trace_csv,
)
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel


def _resp(n=50):
    f = np.logspace(1, 6, n)
    h = 10.0 / (1 + 1j * f / 1e3)
    return FrequencyResponse(freq_hz=f, response=h, quantity="plant", meta={"who": "test"})


def test_views():
    r = _resp()
    # 20*log10(10) = 20 dB at low frequency; a single pole gives -45 deg at its corner.
    assert r.mag_db[0] == pytest.approx(20.0, abs=1e-3)
    i = np.argmin(abs(r.freq_hz - 1e3))
    assert r.phase_deg[i] == pytest.approx(-np.degrees(np.arctan(r.freq_hz[i] / 1e3)), abs=1e-9)


@pytest.mark.parametrize("f,h,msg", [
    ([1.0], [1.0], "at least 2"),
    ([1.0, 0.0], [1, 1], "positive"),
    ([2.0, 1.0], [1, 1], "increasing"),
    ([1.0, 2.0], [1, np.nan], "not finite"),
    ([1.0, 2.0, 3.0], [1, 1], "equal counts"),
])
def test_validation(f, h, msg):
    with pytest.raises(InputError, match=msg):
        FrequencyResponse(freq_hz=f, response=h)


def test_json_round_trip(tmp_path):
    r = _resp()
    p = tmp_path / "r.json"
    r.to_json(p)
    back = FrequencyResponse.from_json(p)
    np.testing.assert_array_equal(back.freq_hz, r.freq_hz)
    np.testing.assert_array_equal(back.response, r.response)
    assert back.meta == r.meta and back.quantity == "plant"


def test_canonical_csv_round_trip(tmp_path):
    r = _resp()
    r2 = FrequencyResponse(freq_hz=r.freq_hz, response=r.response, stddev=np.full(len(r), 0.01))
    write_sweep_csv(r2, tmp_path / "s.csv")
    back = read_canonical_sweep(tmp_path / "s.csv")
    np.testing.assert_allclose(back.response, r2.response, rtol=1e-12)
    np.testing.assert_allclose(back.stddev, 0.01)
    assert back.provenance.sources == (str(tmp_path / "s.csv"),)


def test_band_and_merge():
    r = _resp(101)
    lo, hi = r.band(None, 1e3), r.band(1e3, None)
    m = FrequencyResponse.merge([lo, hi])
    np.testing.assert_array_equal(m.freq_hz, r.freq_hz)
    with pytest.raises(InputError, match="band"):
        r.band(2e6, 3e6)


def test_trace_round_trip(tmp_path):
    t = np.linspace(-1e-3, 1e-3, 200)
    tr = TimeTrace(time_s=t, channels={"vout": np.sin(t * 1e4), "iload": t})
    write_trace_csv(tr, tmp_path / "t.csv")
    back = read_canonical_trace(tmp_path / "t.csv")
    assert back.names == ["vout", "iload"]
    np.testing.assert_allclose(back.channel("iload"), t, rtol=1e-12)
    with pytest.raises(InputError, match="no channel"):
        back.channel("ch9")


def test_plant_model_matches_scipy_freqs_zpk(tmp_path):
    # Reference: scipy.signal.freqs_zpk (general-purpose library).
    z = np.array([-2e4])
    p = np.array([-1e3, -5e4 + 2e5j, -5e4 - 2e5j])
    m = PlantModel(zeros=z, poles=p, k=3e8)
    w = np.logspace(1, 7, 300)
    _, h = signal.freqs_zpk(z, p, 3e8, worN=w)
    np.testing.assert_allclose(m.at_s(1j * w), h, rtol=1e-12)
    m.to_json(tmp_path / "m.json")
    back = PlantModel.from_json(tmp_path / "m.json")
    np.testing.assert_allclose(back.response(w / 2 / np.pi), h, rtol=1e-12)
