"""The few numbers a designer quotes about a design, taken from its result objects.

:func:`design_summary` is the one place these figures are gathered: the end
of ``benchfit demo``, the report's "numbers to quote" box, its tables, the
picture annotations and ``--json`` all read them from here (or from the same
design fields), and every human view writes them with :mod:`benchfit.numfmt`.
"""

from __future__ import annotations

import math
from typing import Any

from benchfit.loop.closure import rate_of_closure_db
from benchfit.loop.design import Design
from benchfit.loop.networks import network_label
from benchfit.numfmt import db, db_per_decade, deg, eng, pct, sig


def rate_of_closure(design: Design) -> dict[str, Any]:
    """The design's rate of closure, computed once.

    It is read with the **snapped** parts on the **nominal** plant (the first
    corner) at that loop's own crossover, from the actual responses
    (:func:`benchfit.loop.closure.rate_of_closure_db`).

    Returns
    -------
    dict
        ``rate_of_closure_db``, ``freq_hz`` (where it was read), ``parts``
        ('snapped') and ``plant`` (the corner's name).
    """
    fc = float(design.snapped.corners[0].crossover_hz)
    value = math.nan
    if math.isfinite(fc):
        value = rate_of_closure_db(design.corners[0], design.snapped.compensator, fc)
    return {"rate_of_closure_db": value, "freq_hz": fc, "parts": "snapped", "plant": design.corners[0].name}


def design_summary(design: Design) -> dict[str, Any]:
    """Snapped-part figures of the worst corner, the yield and the part list.

    Every number is read from the design (nothing but the rate of closure is
    computed, and that once: :func:`rate_of_closure`), so the summary always
    matches the design JSON: ``predicted.snapped`` for the margins, ``spread``
    for the yield and percentiles, ``components.snapped`` for the parts.
    """
    m = design.snapped.worst_margins()
    roc = rate_of_closure(design)
    out: dict[str, Any] = {
        "network": design.kind,
        "method": design.method,
        "crossover_hz": m.crossover_hz,
        "phase_margin_deg": m.phase_margin_deg,
        "gain_margin_db": m.gain_margin_db,
        "phase_crossover_hz": m.phase_crossover_hz,
        "delay_margin_s": m.delay_margin_s,
        "modulus_margin": m.modulus_margin,
        "closed_loop_stable": m.closed_loop_stable,
        "targets_met": design.targets_met,
        "worst_corner": design.corners[design.snapped.worst].name,
        "parts": dict(design.snapped.network.parts),
        "target_crossover_hz": design.targets.crossover_hz,
        "target_phase_margin_deg": design.targets.phase_margin_deg,
        "target_gain_margin_db": design.targets.gain_margin_db,
        "rate_of_closure_db": roc["rate_of_closure_db"],
        "rate_of_closure_freq_hz": roc["freq_hz"],
        "rate_of_closure_parts": roc["parts"],
        "band_hz": list(design.corners[0].band_hz) if design.corners[0].band_hz else None,
    }
    if design.spread is not None:
        pc = design.spread.percentiles
        out.update({"yield": design.spread.yield_fraction, "draws": design.spread.draws,
                    "r_tol": design.spread.r_tol, "c_tol": design.spread.c_tol,
                    "phase_margin_p1_deg": pc["pm_deg"]["p1"], "phase_margin_p99_deg": pc["pm_deg"]["p99"],
                    "crossover_p1_hz": pc["crossover_hz"]["p1"], "crossover_p99_hz": pc["crossover_hz"]["p99"],
                    "gain_margin_p1_db": pc["gm_db"]["p1"]})
    return out


def part_text(name: str, value: float) -> str:
    """'R1 10 kΩ', 'C2 150 pF'."""
    return f"{name} {eng(value, 'Ω' if name.startswith('R') else 'F')}"


def gain_margin_text(gm_db: float, phase_crossover_hz: float, band_hz: Any = None) -> str:
    """'gain margin 32.8 dB at 231 kHz', or in words why there is none."""
    if math.isfinite(gm_db) and math.isfinite(phase_crossover_hz):
        return f"gain margin {db(gm_db)} at {eng(phase_crossover_hz, 'Hz')}"
    top = f" below {eng(float(band_hz[1]), 'Hz')}" if band_hz else ""
    return (f"gain margin not defined: the phase does not cross −180°{top} "
            "(no phase crossing in the examined band)")


def rate_of_closure_text(s: dict[str, Any]) -> str:
    """'rate of closure 25 dB/decade at 19.6 kHz (snapped parts, nominal plant)'."""
    v, f = s.get("rate_of_closure_db", math.nan), s.get("rate_of_closure_freq_hz", math.nan)
    if not (math.isfinite(v) and math.isfinite(f)):
        return "rate of closure not defined: the loop does not cross over"
    return f"rate of closure {db_per_decade(v)} at {eng(f, 'Hz')} ({s.get('rate_of_closure_parts', 'snapped')} " \
           "parts, nominal plant)"


def summary_lines(s: dict[str, Any]) -> list[str]:
    """The summary as short lines of text (the end of ``benchfit demo``, the report's quote box)."""
    lines = [
        f"{network_label(s['network'])} network ({s['method']}), snapped parts: "
        + ", ".join(part_text(n, v) for n, v in s["parts"].items()),
        f"crossover {eng(s['crossover_hz'], 'Hz')}"
        + (f" (target {eng(s['target_crossover_hz'], 'Hz')})" if s.get("target_crossover_hz") else "")
        + (f", {rate_of_closure_text(s)}" if "rate_of_closure_db" in s else ""),
        f"phase margin {deg(s['phase_margin_deg'])} (target ≥ {deg(s['target_phase_margin_deg'])}), "
        + gain_margin_text(s["gain_margin_db"], s.get("phase_crossover_hz", math.nan), s.get("band_hz"))
        + f" (target ≥ {db(s['target_gain_margin_db'])})",
        f"modulus margin {sig(s['modulus_margin'])}, delay margin {eng(s['delay_margin_s'], 's')}, "
        f"closed loop {'stable' if s['closed_loop_stable'] else 'UNSTABLE'}",
    ]
    if "yield" in s:
        lines.append(f"tolerance spread ({s['draws']} draws): phase margin {deg(s['phase_margin_p1_deg'])} to "
                     f"{deg(s['phase_margin_p99_deg'])} (1st to 99th percentile), crossover "
                     f"{eng(s['crossover_p1_hz'], 'Hz')} to {eng(s['crossover_p99_hz'], 'Hz')}, "
                     f"yield {pct(s['yield'])}")
    return lines
