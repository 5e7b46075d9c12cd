"""`benchfit design` on the repository's sample plants (our own generated scenarios).

The issue's acceptance: on the sample plants the snapped loop meets the
requested margins.  The check is re-done here independently of benchfit's
margin module: python-control's ``stability_margins`` (general-purpose
reference library) on the loop model written to the design JSON.
"""

import json
from pathlib import Path

import control
import numpy as np
import pytest

from benchfit.cli import main
from benchfit.fitting.model import PlantModel

SAMPLES = Path(__file__).resolve().parents[1] / "sample_data"


def ref_pm_at(t: PlantModel, fc_hz: float) -> float:
    """PM at the gain crossing nearest fc; the exact delay enters as −ω·τ at that crossing."""
    wc = 2 * np.pi * fc_hz
    sys = control.zpk(t.zeros / wc, t.poles / wc, t.k * wc ** (len(t.zeros) - len(t.poles)))
    gm, pm, sm, wpc, wgc, wms = control.stability_margins(sys, returnall=True)
    i = int(np.argmin(np.abs(np.log(wgc))))
    return pm[i] - np.degrees(wgc[i] * wc * t.delay_s)


@pytest.mark.parametrize("plants,crossover", [
    (["buck_plant.csv"], "10k"),
    (["dialects/two_loads.csv@heavy", "dialects/two_loads.csv@light"], "8k"),
])
def test_sample_design_meets_margins(tmp_path, capsys, plants, crossover):
    out = tmp_path / "d.json"
    rc = main(["design", *[str(SAMPLES / p) for p in plants], "--network", "type3",
               "--crossover", crossover, "--phase-margin", "50", "--gain-margin", "10",
               "--divider", "30k:10k", "--opamp-gbw", "10M", "--series", "E96:E12",
               "--draws", "300", "--seed", "2", "-o", str(out), "--json"])
    assert rc == 0
    d = json.loads(capsys.readouterr().out)
    assert d["targets_met"]
    for m in d["predicted_corners"]["snapped"]:
        assert m["phase_margin_deg"] >= 50 - 0.1
        assert m["gain_margin_db"] >= 10 - 0.1
    # independent check of the nominal corner's snapped loop (delay applied exactly)
    t = PlantModel.from_dict(d["loop_model"]["snapped"])
    fc = d["predicted_corners"]["snapped"][0]["crossover_hz"]
    assert ref_pm_at(t, fc) == pytest.approx(d["predicted_corners"]["snapped"][0]["phase_margin_deg"],
                                             abs=0.1)
