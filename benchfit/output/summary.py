"""The few numbers a designer quotes about a design, taken from its result objects."""

from __future__ import annotations

from typing import Any

from benchfit.loop.design import Design
from benchfit.output.style import eng


def design_summary(design: Design) -> dict[str, Any]:
    """Snapped-part figures of the worst corner, the yield and the part list.

    Every number is read from the design (nothing is recomputed), so the
    summary always matches the design JSON: ``predicted.snapped`` for the
    margins, ``spread`` for the yield and percentiles, ``components.snapped``
    for the parts.
    """
    m = design.snapped.worst_margins()
    out: dict[str, Any] = {
        "network": design.kind,
        "method": design.method,
        "crossover_hz": m.crossover_hz,
        "phase_margin_deg": m.phase_margin_deg,
        "gain_margin_db": m.gain_margin_db,
        "delay_margin_s": m.delay_margin_s,
        "modulus_margin": m.modulus_margin,
        "closed_loop_stable": m.closed_loop_stable,
        "targets_met": design.targets_met,
        "worst_corner": design.corners[design.snapped.worst].name,
        "parts": dict(design.snapped.network.parts),
        "target_crossover_hz": design.targets.crossover_hz,
        "target_phase_margin_deg": design.targets.phase_margin_deg,
        "target_gain_margin_db": design.targets.gain_margin_db,
    }
    if design.spread is not None:
        pc = design.spread.percentiles
        out.update({"yield": design.spread.yield_fraction, "draws": design.spread.draws,
                    "phase_margin_p1_deg": pc["pm_deg"]["p1"], "phase_margin_p99_deg": pc["pm_deg"]["p99"],
                    "crossover_p1_hz": pc["crossover_hz"]["p1"], "crossover_p99_hz": pc["crossover_hz"]["p99"],
                    "gain_margin_p1_db": pc["gm_db"]["p1"]})
    return out


def part_text(name: str, value: float) -> str:
    """'R1 10 kΩ', 'C2 150 pF'."""
    return f"{name} {eng(value, 'Ω' if name.startswith('R') else 'F')}"


def summary_lines(s: dict[str, Any]) -> list[str]:
    """The summary as short lines of text (the end of ``benchfit demo``)."""
    lines = [
        f"{s['network']} network ({s['method']}), snapped parts: "
        + ", ".join(part_text(n, v) for n, v in s["parts"].items()),
        f"crossover {eng(s['crossover_hz'], 'Hz')}"
        + (f" (target {eng(s['target_crossover_hz'], 'Hz')})" if s.get("target_crossover_hz") else ""),
        f"phase margin {s['phase_margin_deg']:.1f}° (target ≥ {s['target_phase_margin_deg']:g}°), "
        f"gain margin {s['gain_margin_db']:.1f} dB (target ≥ {s['target_gain_margin_db']:g} dB)",
        f"modulus margin {s['modulus_margin']:.2f}, delay margin {eng(s['delay_margin_s'], 's')}, "
        f"closed loop {'stable' if s['closed_loop_stable'] else 'UNSTABLE'}",
    ]
    if "yield" in s:
        lines.append(f"tolerance spread ({s['draws']} draws): phase margin {s['phase_margin_p1_deg']:.1f}° to "
                     f"{s['phase_margin_p99_deg']:.1f}° (1st to 99th percentile), crossover "
                     f"{eng(s['crossover_p1_hz'], 'Hz')} to {eng(s['crossover_p99_hz'], 'Hz')}, "
                     f"yield {100 * s['yield']:.1f} %")
    return lines
