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
