"""One clear line instead of a traceback for inputs at the edge: absurd frequencies, numpy's
floating-point notes, file names with plot-label syntax, runaway option values."""

import numpy as np
import pytest

from benchfit.cli import main
from benchfit.data import FrequencyResponse, write_sweep_csv
from benchfit.errors import FitError
from benchfit.fitting.api import FIT_SPAN_HZ, fit


def _sweep(path, top_hz):
    f = np.geomspace(top_hz / 1e3, top_hz, 50)
    # first-order low-pass, pole a decade below the top (textbook formula)
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=1 / (1 + 1j * f / (top_hz / 10))), path)
    return path


@pytest.mark.parametrize("top_hz", [1e300, 1e308, 1e160, 1e-300])
def test_fit_refuses_frequencies_outside_its_span_naming_the_file(tmp_path, capsys, top_hz):
    # 1e300 Hz made vector fitting raise "Geometric sequence cannot include zero", 1e308
    # "SVD did not converge"
    path = _sweep(tmp_path / "far.csv", top_hz)
    assert main(["fit", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert f"{path}: frequencies" in err and "check the frequency column's unit" in err


def test_fit_span_edges_still_fit(tmp_path):
    from benchfit.data import read_sweep

    lo, hi = FIT_SPAN_HZ
    for top in (hi, lo * 1e3):
        result = fit(read_sweep(_sweep(tmp_path / f"edge{top:g}.csv", top)), order=1, delay="none")
        # the pole is where the data put it: a decade below the top
        assert result.model.order == 1
        assert -result.model.poles[0].real / (2 * np.pi) == pytest.approx(top / 10, rel=1e-3)
    with pytest.raises(FitError, match="outside"):
        fit(read_sweep(_sweep(tmp_path / "over.csv", hi * 10)))


def test_report_with_plot_label_syntax_in_a_file_name(tmp_path, capsys):
    # a '$...$' pair in a name was parsed by matplotlib as math: "Unknown symbol: \x"
    from scenario_plants import buck_plant

    from benchfit.loop.design import design
    from benchfit.loop.loopgain import LoopPlant
    from benchfit.loop.sensing import Sensing
    from benchfit.loop.synthesis import Targets

    m = buck_plant()
    f = np.geomspace(10, 1e6, 120)
    sweep = tmp_path / "buck$\\x$.csv"
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=m.response(f)), sweep)
    d = tmp_path / "design.json"
    design(LoopPlant(m, Sensing.divider(30e3, 10e3), name="buck", band_hz=(10, 1e6)), "type3",
           Targets(20e3, 55, 10), draws=0).to_json(d)
    out = tmp_path / "r.html"
    assert main(["report", str(d), "--sweep", str(sweep), "-o", str(out)]) == 0, capsys.readouterr().err
    assert "buck$\\x$.csv" in out.read_text(encoding="utf-8")


def test_numpy_floating_point_notes_do_not_reach_stderr(tmp_path, capsys, monkeypatch):
    import warnings

    import benchfit.data.summary as summary_mod

    real = summary_mod.summary

    def noisy(obj, *a, **k):
        np.log10(np.zeros(3))                        # RuntimeWarning: divide by zero
        np.sqrt(-np.ones(2))                         # RuntimeWarning: invalid value
        warnings.warn("a library's own warning\nover two lines", UserWarning, stacklevel=1)
        return real(obj, *a, **k)

    monkeypatch.setattr(summary_mod, "summary", noisy)
    path = _sweep(tmp_path / "s.csv", 1e5)
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        assert main(["inspect", str(path)]) == 0
    err = capsys.readouterr().err
    assert "RuntimeWarning" not in err and "encountered" not in err, err
    assert err.splitlines() == ["benchfit: warning: a library's own warning over two lines"]


def _loop_sweep(path):
    # T = wc / (s (1 + s/(2 pi 100 kHz))), crossing 0 dB near 10 kHz (textbook integrator + pole)
    f = np.geomspace(10, 1e7, 2000)
    s = 2j * np.pi * f
    wc = 2 * np.pi * 1e4
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=wc / (s * (1 + s / (2 * np.pi * 1e5))),
                                      quantity="loop"), path)
    return path


def test_margins_delay_subtracts_its_phase_and_refuses_what_the_sweep_cannot_follow(tmp_path, capsys):
    import json

    path = _loop_sweep(tmp_path / "loop.csv")
    assert main(["margins", str(path), "--json"]) == 0
    m0 = json.loads(capsys.readouterr().out)
    assert main(["margins", str(path), "--json", "--delay", "2us"]) == 0
    m1 = json.loads(capsys.readouterr().out)
    fc = m0["crossover_hz"]
    # a pure delay keeps |T| and subtracts 360 fc tau degrees at the crossover (textbook)
    assert m1["crossover_hz"] == pytest.approx(fc, rel=1e-6)
    assert m1["phase_margin_deg"] == pytest.approx(m0["phase_margin_deg"] - 360 * fc * 2e-6, abs=0.05)
    # --delay 20k used to be 20 000 s: 44 s of work and a negative closed-loop pole count
    for given in ("20000", "1"):
        assert main(["margins", str(path), "--delay", given]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "--delay: " in err and "the largest delay this loop can carry" in err
