"""Reading a loop gain from a file, and its margins, whatever form it comes in.

A loop gain can be

* a sweep file (measured loop gain; any dialect :func:`benchfit.data.read_sweep` reads),
* a JSON model (``"kind": "plant_model"``), a fit result (has ``"model"``) or a
  frequency response (``"kind": "frequency_response"``),
* a design (``"kind": "design"``): its snapped loop, ``loop_model.snapped``
  (a model) or ``loop_data.snapped`` (a sweep).
"""

from __future__ import annotations

import math
import os
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fileio import malformed_as_input_error, read_json
from benchfit.fitting.model import PlantModel
from benchfit.loop.margins import Margins, margins_from_data, margins_of_model


def _looks_like_json(path: Path) -> bool:
    if path.suffix.lower() == ".json":
        return True
    try:
        with open(path, "rb") as fh:
            head = fh.read(64).lstrip(b"\xef\xbb\xbf \t\r\n")
    except OSError:
        return False
    return head.startswith(b"{")


def read_loop(path: str | os.PathLike, *, which: str = "snapped",
              **read_options: Any) -> PlantModel | FrequencyResponse:
    """The loop gain held in ``path`` (see the module notes for the forms accepted).

    Parameters
    ----------
    path
        Sweep file or JSON.
    which
        For a design: ``"snapped"`` (default) or ``"ideal"`` parts.
    **read_options
        Passed to :func:`benchfit.data.read_sweep` for sweep files.

    Raises
    ------
    InputError
        Missing file, unknown JSON kind, or a design without a loop.
    """
    p = Path(path)
    if not p.exists():
        raise InputError("file not found", source=str(path))
    if not _looks_like_json(p):
        from benchfit.data import read_sweep

        return read_sweep(p, **read_options)
    d = read_json(p)
    kind = d.get("kind")
    with malformed_as_input_error(path, "JSON file"):
        if kind in ("design", "stage_design"):
            if which not in ("snapped", "ideal"):
                raise InputError(f"{which!r}: expected 'snapped' or 'ideal'")
            if isinstance(d.get("loop_model"), dict) and which in d["loop_model"]:
                return PlantModel.from_dict(d["loop_model"][which])
            if isinstance(d.get("loop_data"), dict) and which in d["loop_data"]:
                return FrequencyResponse.from_dict(d["loop_data"][which])
            raise InputError("design has neither loop_model nor loop_data with "
                             f"{which!r} parts")
        if kind == "frequency_response" or ("freq_hz" in d and "response" in d):
            return FrequencyResponse.from_dict(d)
        if kind == "plant_model" or "poles" in d or isinstance(d.get("model"), dict):
            return PlantModel.from_dict(d)
    raise InputError(f"JSON of kind {kind!r} holds no loop gain; expected a model, a fit result, "
                     "a frequency response or a design", source=str(path))


def margins_of_loop(loop: PlantModel | FrequencyResponse, *,
                    unstable_open_loop_poles: int | None = None,
                    band: tuple[float | None, float | None] | None = None,
                    extra_delay_s: float = 0.0, integrators: int | None = None) -> Margins:
    """Margins of a loop gain given as a model or a sweep.

    Parameters
    ----------
    loop
        The loop gain T.
    unstable_open_loop_poles
        P for the Nyquist count: counted from a model's poles when None,
        0 for a sweep when None, and then the sweep is checked for signs of
        open-loop right-half-plane poles (:func:`benchfit.loop.openloop.check_open_loop`:
        the verdict becomes "undecided" when its fit demands them).
    band
        (f_min_hz, f_max_hz) to restrict to (either may be None).
    extra_delay_s
        A pure delay added to the loop, exactly (e.g. to see the margin
        left after a sampling delay).
    integrators
        Open-loop poles at s = 0 of a sweep, when the caller knows them
        (None: from the fit of its low-frequency asymptote); a model counts its own.
    """
    lo, hi = band if band is not None else (None, None)
    d = float(extra_delay_s)
    if not math.isfinite(d) or d < 0:
        raise InputError(f"delay must be >= 0 s, found {extra_delay_s}", source="--delay")
    if isinstance(loop, PlantModel):
        fitted = fitted_quantity(loop)
        if d:
            loop = PlantModel(loop.zeros, loop.poles, loop.k, delay_s=loop.delay_s + d,
                              provenance=loop.provenance.derive("add_delay", {"delay_s": d}))
        m = margins_of_model(loop, f_min_hz=lo, f_max_hz=hi,
                             unstable_open_loop_poles=unstable_open_loop_poles)
        if fitted is not None:
            m = replace(m, warnings=(_not_a_loop(fitted, "the model is fitted to a sweep that"),)
                        + m.warnings)
        return m
    if isinstance(loop, FrequencyResponse):
        sweep = loop.band(lo, hi) if (lo is not None or hi is not None) else loop
        T = sweep.response * np.exp(-2j * np.pi * sweep.freq_hz * d) if d else sweep.response
        prov = sweep.provenance if not d else sweep.provenance.derive("add_delay", {"delay_s": d})
        m = margins_from_data(sweep.freq_hz, T,
                              unstable_open_loop_poles=unstable_open_loop_poles or 0,
                              integrators=integrators, provenance=prov)
        if unstable_open_loop_poles is None:
            # P = 0 was assumed: check that the sweep does not look open-loop unstable
            from benchfit.loop.openloop import check_open_loop

            m = check_open_loop(sweep, m)
        if sweep.quantity in NOT_A_LOOP:
            m = replace(m, warnings=(_not_a_loop(sweep.quantity, "the sweep"),) + m.warnings)
        if (m.gain_margin_gaps_hz or m.modulus_margin_gaps_hz) and (sweep.meta or {}).get("adaptive"):
            m = replace(m, warnings=m.warnings + (ADAPTIVE_GAPS,))
        return m
    raise InputError(f"a loop must be a model or a sweep, found {type(loop).__name__}")



#: Said of an adaptive capture's sweep read point by point where the gap checks fire: its
#: points were placed where a fitted model decides the margins, so the gaps are the plan's.
ADAPTIVE_GAPS = ("this sweep is an adaptive capture's: its points were placed where a model "
                 "fitted during the capture decides the margins, so the gaps above are spaces "
                 "the plan left between points, read here without a model; the capture's JSON "
                 "gives the margins with σ, and `benchfit fit` then `benchfit margins` on the "
                 "fit's JSON reads them from the model")


#: Quantities a sweep can be marked with that are not a loop gain T.
NOT_A_LOOP = ("plant", "closed", "impedance", "compensator")


def _not_a_loop(quantity: str, what: str) -> str:
    return (f"{what} is marked as a {quantity} measurement, not a loop gain; these margins "
            "treat it as T (a plant's margins are those of the loop with unity compensation "
            "and sensing; `benchfit design` closes the loop with a network)")


def fitted_quantity(model: PlantModel) -> str | None:
    """The quantity of the sweep a model was fitted to, when it is not a loop gain.

    Evidence weighed: the model's own provenance only: its step is ``fit`` and the
    step it came from read a sweep marked (``--quantity`` or the file's header) as one
    of :data:`NOT_A_LOOP`.  A model derived further (a design's loop) has another step
    and is not judged; a sweep whose quantity was not stated gives None.
    """
    prov = model.provenance
    if prov.step != "fit":
        return None
    for parent in prov.parents:
        q = (parent.get("settings") or {}).get("quantity") if isinstance(parent, dict) else None
        if parent.get("step") == "read_sweep" and q in NOT_A_LOOP:
            return str(q)
    return None
