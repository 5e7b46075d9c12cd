"""``--network auto`` for an op-amp stage: which network, and why.

The evidence and its order are in :func:`choose_network`'s docstring.
"""

from __future__ import annotations

from benchfit.errors import DesignError
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.stage_load import StageLoad
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.stage_synthesis import (
    StageSynthesis,
    _margins,
    gain_resistors,
    stage_grid,
    synthesize_stage,
)
from benchfit.loop.targets import Targets
from benchfit.numfmt import eng

#: The order networks are tried in by :func:`choose_network` (fewest parts, least cost first).
AUTO_ORDER = ("lead", "lag-lead", "lag", "isolation", "snubber")


def snubber_applies(load: StageLoad, fc_hz: float) -> bool:
    """True when the load capacitor's ESR is too low to help: its zero lies above ``fc_hz``
    (the crossover plain feedback would have) or the capacitor has no ESR."""
    fz = load.esr_zero_hz()
    return load.known and (fz is None or fz > fc_hz)


def choose_network(lp: LoopPlant, targets: Targets, *, gain: float, stage: str = "noninverting",
                   load: StageLoad | None = None, r_level: float = 10e3,
                   lag_at: str = "across") -> tuple[StageSynthesis, list[str]]:
    """Pick the network for ``--network auto`` and say why.

    Evidence weighed, in order: (1) plain feedback already meets the targets
    -> no network; (2) each network of :data:`AUTO_ORDER` that can be placed
    (isolation and snubber only when Ro and CL are known, the snubber only
    when the ESR zero lies above the plain crossover) and lands on the
    phase-margin target with parts in a practical range
    (:meth:`~benchfit.loop.stage_networks.StageNetwork.practical_warnings`); among those, the highest crossover (the fastest
    closed loop and load-step recovery) wins, ties to the earlier in the
    order, the bandwidth read at the lowest gain crossing (:func:`loop_bandwidth_hz`); (3) if none lands on target, the highest-crossover one that meets it.

    Returns
    -------
    synthesis, reasons
        ``reasons`` holds one line per network considered.
    """
    load = load or StageLoad()
    reasons: list[str] = []
    try:
        plain = synthesize_stage("plain", lp, targets, gain=gain, stage=stage, load=load,
                                 r_level=r_level, lag_at=lag_at)
        return plain, [f"plain feedback already gives PM {plain.pm_deg:.1f}° at "
                       f"{eng(plain.crossover_hz, 'Hz')}: no compensation network needed"]
    except DesignError as e:
        reasons.append(f"plain: {e}")
    f = stage_grid(lp)
    pm0, _, _, fc0 = _margins(lp, f, StageNetwork("plain", gain_resistors(gain, stage, r_level),
                                                  stage, load, lag_at), None)
    good: list[StageSynthesis] = []
    for kind in AUTO_ORDER:
        if kind in ("isolation", "snubber") and not load.known:
            reasons.append(f"{kind}: not tried (needs --output-resistance and --load-cap)")
            continue
        if kind == "snubber" and not snubber_applies(load, float(fc0[0])):
            reasons.append(f"snubber: not needed, the capacitor's ESR zero "
                           f"({eng(load.esr_zero_hz(), 'Hz')}) lies below the crossover")
            continue
        try:
            s = synthesize_stage(kind, lp, targets, gain=gain, stage=stage, load=load,
                                 r_level=r_level, lag_at=lag_at)
        except DesignError as e:
            reasons.append(f"{kind}: {e}")
            continue
        bad = s.network.practical_warnings()
        if bad:
            reasons.append(f"{kind}: PM {s.pm_deg:.1f}° at {eng(s.crossover_hz, 'Hz')} but not "
                           f"practical ({bad[0]})")
            continue
        good.append(s)
        reasons.append(f"{kind}: PM {s.pm_deg:.1f}° at {eng(s.crossover_hz, 'Hz')}"
                       + ("" if s.on_target else " (not on target)"))
    if not good:
        raise DesignError("no stage network meets the targets on this plant: "
                          + "; ".join(reasons))
    pool = [s for s in good if s.on_target] or good
    bw = {id(s): loop_bandwidth_hz(lp, s.network) for s in pool}
    best = max(pool, key=lambda s: (bw[id(s)], -AUTO_ORDER.index(s.network.kind)))
    reasons.append(f"chosen: {best.network.kind}, the widest loop bandwidth (|T| first falls to 1 "
                   f"at {eng(bw[id(best)], 'Hz')}) among the networks that "
                   + ("land on the target" if best.on_target else "meet the target"))
    return best, reasons


def loop_bandwidth_hz(lp: LoopPlant, net: StageNetwork) -> float:
    """The lowest gain crossing of T (exact margins): where the loop first lets go.

    A dual-feedback loop can fall to |T| ≈ 1 where its two paths hand over and rise
    again; its main crossover then overstates how far up the loop holds."""
    from benchfit.loop.prediction import predict

    m = predict([lp], net, None).corners[0]
    f = [c["freq_hz"] for c in m.crossings if c.get("kind") == "gain"]
    return float(min(f)) if f else float(m.crossover_hz)
