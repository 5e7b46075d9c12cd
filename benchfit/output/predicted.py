"""A design's predictions as named curves (for the report, ``benchfit predict`` and CSV).

The numbers come from :func:`benchfit.loop.predict.predict` on the design's
loop gain (nominal plant, ideal or snapped parts); this module only names
them and turns them into :class:`~benchfit.output.curves.Curve` objects.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.data.trace import TimeTrace
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.design import Design
from benchfit.loop.predict import Prediction, predict
from benchfit.numfmt import eng
from benchfit.output.choices import CURVE_NAMES, WHICH
from benchfit.output.curves import Curve
from benchfit.provenance import Provenance


def design_loop(design: Design, which: str = "snapped") -> PlantModel | FrequencyResponse:
    """Loop gain T of the nominal plant with the ideal or snapped parts."""
    if which not in WHICH:
        raise InputError(f"{which!r}; expected one of {', '.join(WHICH)}", source="--parts")
    pred = design.snapped if which == "snapped" else design.ideal
    return pred.loops[0]


def design_prediction(design: Design, *, which: str = "snapped", reference_step_v: float = 1.0,
                      z_open: PlantModel | FrequencyResponse | None = None,
                      load_step_a: float | None = None) -> Prediction:
    """Everything :func:`benchfit.loop.predict.predict` gives for the design's loop.

    Parameters
    ----------
    design
        The design.
    which
        'snapped' (default) or 'ideal' parts.
    reference_step_v
        Reference step, V at the reference input.
    z_open
        Open-loop output impedance (ohm) for the impedance (and load step, if a model).
    load_step_a
        Load-current step, A.
    """
    return predict(design_loop(design, which), sensing_gain=design.sensing.gain,
                   reference_step_v=reference_step_v, z_open=z_open, load_step_a=load_step_a)


def prediction_curves(pred: Prediction, which: str = "snapped", loop: Any = None) -> dict[str, Curve]:
    """Named curves of a prediction: loop (when given), closed, step, zout_open/zout_closed, load_step."""
    tag = f" ({which} parts)"
    prov = pred.provenance
    out: dict[str, Curve] = {}
    if loop is not None:
        f = pred.closed.freq_hz
        t = loop.response(f) if isinstance(loop, PlantModel) else loop.response
        f = f if isinstance(loop, PlantModel) else loop.freq_hz
        out["loop"] = Curve("loop gain T" + tag, "freq_hz", f, t, "1", prov)
    out["closed"] = Curve("closed loop Vout/Vref" + tag, "freq_hz", pred.closed.freq_hz,
                          pred.closed.response, "1", prov)
    if pred.step is not None:
        out["step"] = Curve(f"predicted output for a {eng(pred.step.step_size, 'V')} reference step" + tag,
                            "time_s",
                            pred.step.time_s, pred.step.value, "V", prov)
    if pred.impedance is not None:
        z = pred.impedance
        out["zout_open"] = Curve("open loop", "freq_hz", z.freq_hz, z.open_loop, "ohm", prov)
        out["zout_closed"] = Curve("closed loop" + tag, "freq_hz", z.freq_hz, z.closed_loop, "ohm", prov)
    if pred.load is not None:
        out["load_step"] = Curve(f"predicted deviation for a {eng(pred.load.step_size, 'A')} load step" + tag,
                                 "time_s", pred.load.time_s, pred.load.value, "V", prov)
    return out


def design_curve(design: Design, name: str, *, which: str = "snapped",
                 z_open: PlantModel | FrequencyResponse | None = None, reference_step_v: float = 1.0,
                 load_step_a: float = 1.0) -> Curve:
    """One named curve of a design (``benchfit predict --curve NAME``).

    Raises
    ------
    InputError
        Unknown name, or a curve that needs what was not given (an
        impedance for ``zout``/``load_step``, a model for time responses).
    """
    if name not in CURVE_NAMES:
        raise InputError(f"curve {name!r} unknown; expected one of {', '.join(CURVE_NAMES)}", source="--curve")
    if name in ("zout", "load_step") and z_open is None:
        raise InputError(f"the {name} curve needs the open-loop output impedance (--zout FILE)", source="--curve")
    loop = design_loop(design, which)
    if name == "load_step" and isinstance(z_open, FrequencyResponse):
        # the load step is simulated in time: it needs a model of the impedance, so fit the sweep
        from benchfit.fitting import fit

        z_open = fit(z_open).model
    pred = design_prediction(design, which=which, reference_step_v=reference_step_v, z_open=z_open,
                             load_step_a=load_step_a if name == "load_step" else None)
    curves = prediction_curves(pred, which, loop)
    key = "zout_closed" if name == "zout" else name
    if key not in curves:
        why = "; ".join(pred.warnings) or "not available for this design"
        raise InputError(f"no {name} curve: {why}", source="--curve")
    return in_band(curves[key], design.corners[0].band_hz)


def in_band(curve: Curve, band_hz: tuple[float, float] | None) -> Curve:
    """A frequency curve cut to the plant's measured band (the model beyond it is a guess).

    The predictions are computed on a wide grid (every pole and zero ± decades, so
    crossings and time responses are exact); a curve written for a person covers
    the band the plant was measured over.  Time curves and curves without a
    known band are returned as they are.
    """
    if not curve.is_frequency or not band_hz:
        return curve
    lo, hi = float(band_hz[0]), float(band_hz[1])
    keep = (curve.x >= lo * (1 - 1e-9)) & (curve.x <= hi * (1 + 1e-9))
    if np.count_nonzero(keep) < 2:
        return curve
    prov = Provenance(step="in_band", sources=curve.provenance.sources,
                      settings={**dict(curve.provenance.settings), "band_hz": [lo, hi]})
    return Curve(curve.name, curve.x_name, curve.x[keep], curve.y[keep], curve.unit, prov)


def measured_step_curve(trace: TimeTrace, channel: str | None, step: Any) -> Curve:
    """The measured output step, time from its step instant and value from its initial level.

    ``step`` is the step analysis (a StepResult or StepMeasurement) of the same trace.
    """
    m = getattr(step, "measurement", step)
    y = np.asarray(trace.channel(channel), dtype=float)
    t = trace.time_s - float(m.step_time_s)
    src = ", ".join(Path(s).name for s in trace.provenance.sources) or "trace"
    return Curve(f"measured ({src}, {m.channel or channel or 'first channel'})", "time_s", t, y - float(m.initial_v), "V",
                 Provenance(step="align_step", sources=trace.provenance.sources,
                            settings={"step_time_s": float(m.step_time_s), "initial_v": float(m.initial_v)}))


def read_model_or_sweep(path: str) -> PlantModel | FrequencyResponse:
    """A model (model or fit-result JSON), a frequency-response JSON, or any sweep file."""
    from benchfit.data import read_sweep
    from benchfit.fileio import read_json

    if str(path).lower().endswith(".json"):
        d = read_json(path)
        try:
            if d.get("kind") == "frequency_response" or "freq_hz" in d:
                return FrequencyResponse.from_dict(d)
            return PlantModel.from_dict(d)
        except InputError as e:
            raise InputError(e.message, source=str(path)) from None
        except (KeyError, TypeError, ValueError, AttributeError, IndexError) as e:
            raise InputError(f"model file is incomplete or malformed ({type(e).__name__}: {e})",
                             source=str(path)) from None
    return read_sweep(path)
