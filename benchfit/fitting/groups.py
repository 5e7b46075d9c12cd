"""Named pole and zero groups of a factored model: finding them and cutting them out.

A *group* is one factor of the model in :mod:`benchfit.fitting.parameters`:
``pole3`` (a real pole), ``pair2`` (a complex pole pair), ``zero1``,
``zero_pair1``.  The functions here only look at a structure and its values
(which groups lie above the band, which nearly cancel, which the data cannot
locate) or build the structure without some of them; whether a group may go
is decided in :mod:`benchfit.fitting.selection`.
"""

from __future__ import annotations

import numpy as np

from benchfit.fitting.parameters import TWO_PI, Structure, response
from benchfit.fitting.refine import Refined
from benchfit.fitting.weights import PointSigma

#: With a fitted delay, right-half-plane zeros above this fraction of the top frequency
#: are tested for dropping like zeros above the band (see groups_above).
RHP_NEAR_TOP = 1.0 / 3.0
#: A pole and a zero (or two pairs) closer than this fraction of their frequency nearly cancel.
CANCEL = 0.01


def in_groups(name: str, groups: list[str]) -> bool:
    """True if parameter ``name`` belongs to one of ``groups`` (``zero3``, ``pair2``...)."""
    return name.rsplit("_", 1)[0] in groups or any(name.startswith(g + "_") for g in groups)


def without(st: Structure, values: np.ndarray, drop: list[str]) -> tuple[Structure, np.ndarray]:
    """Structure and values with the named zero groups (``zero3`` or ``zero_pair1``) removed."""
    names = st.names
    keep = [i for i, nm in enumerate(names) if not in_groups(nm, drop)]
    kept = tuple(names[i] for i in keep)
    st2 = Structure.from_names(kept, st.integrators)
    return st2, np.asarray(values)[keep]


def with_delay(st: Structure, values: np.ndarray, tau: float) -> tuple[Structure, np.ndarray]:
    """Structure and values with a delay parameter (``tau`` seconds) appended."""
    st2 = Structure(st.real_poles, st.pole_pairs, st.real_zeros, st.zero_pairs,
                    st.integrators, True)
    return st2, np.append(values, tau)


def dropped_phase_as_delay(st: Structure, values: np.ndarray, drop: list[str],
                            w: np.ndarray) -> float:
    """The delay (s) whose phase −ωτ best matches, over ``w`` (rad/s), the phase of
    the pole and zero groups ``drop``.

    Above the band a zero's or a pole's phase is nearly linear in ω, a delay's
    phase; so when the pruning drops such groups from a model with a delay,
    the delay takes over their phase and the refinement starts next to its
    optimum rather than a wrapped phase away from it.
    """
    v = dict(zip(st.names, values, strict=True))
    phase = np.zeros_like(w)
    for g in drop:
        sign = -1.0 if g.startswith(("pole", "pair")) else 1.0
        if g.startswith(("zero_pair", "pair")):
            w0, q = TWO_PI * v[f"{g}_f0_hz"], v[f"{g}_q"]
            phase += sign * np.unwrap(np.arctan2(w / (w0 * q), 1.0 - (w / w0) ** 2))
        else:
            phase += sign * np.arctan(w / (TWO_PI * v[f"{g}_hz"]))
    return float(-np.dot(w, phase) / np.dot(w, w))


def groups_above(st: Structure, values: np.ndarray, f_max: float,
                       rhp_from: float | None = None, poles: bool = True, zeros: bool = True
                       ) -> list[tuple[str, float]]:
    """(group, |frequency|) of zeros and poles above the band, e.g. ("zero2", 3e7),
    ("zero_pair1", 2e7), ("pole3", 5e7).

    With ``rhp_from`` (Hz), right-half-plane zeros above that frequency are
    listed too: with a delay in the model they are the delay's look-alikes
    (phase lag growing with frequency) and must earn their place the same way.
    A pole above the band is one as well (its lag, −ω/ω_p, is a delay's):
    the refinement can push a spare in-band pole there instead of the delay.
    ``poles=False`` (``zeros=False``) leaves the poles (zeros) out: the user
    holds or bounds one, and its name must not shift.
    """
    v = dict(zip(st.names, values, strict=True))
    out = []
    for nm, x in v.items():
        if nm.startswith("zero") and not zeros:
            continue
        if nm.startswith("zero_pair") and nm.endswith("_f0_hz"):
            g = nm[: -len("_f0_hz")]
            rhp = v[f"{g}_q"] < 0
        elif nm.startswith("zero") and not nm.startswith("zero_pair"):
            g = nm[: -len("_hz")]
            rhp = x < 0
        elif poles and nm.startswith("pair") and nm.endswith("_f0_hz"):
            g, rhp = nm[: -len("_f0_hz")], False
        elif poles and nm.startswith("pole"):
            g, rhp = nm[: -len("_hz")], False
        else:
            continue
        if abs(x) > f_max or (rhp_from is not None and rhp and abs(x) > rhp_from):
            out.append((g, abs(x)))
    return out


def cancelling(st: Structure, values: np.ndarray) -> list[list[str]]:
    """Pole/zero groups that nearly cancel, e.g. [["pair4", "zero_pair1"]], closest first.

    Real poles are matched with real zeros of the same sign, pairs with zero pairs.
    """
    v = dict(zip(st.names, values, strict=True))
    out = []
    for p_kind, z_kind, key in (("pole", "zero", "_hz"), ("pair", "zero_pair", "_f0_hz")):
        n_p = st.real_poles if p_kind == "pole" else st.pole_pairs
        n_z = st.real_zeros if z_kind == "zero" else st.zero_pairs
        for i in range(1, n_p + 1):
            fp = v[f"{p_kind}{i}{key}"]
            for j in range(1, n_z + 1):
                fz = v[f"{z_kind}{j}{key}"]
                d = abs(fp - fz) / abs(fp)
                if d < CANCEL:
                    out.append((d, [f"{p_kind}{i}", f"{z_kind}{j}"]))
    return [g for _, g in sorted(out, key=lambda x: x[0])]


def narrower_than_spacing(st: Structure, values: np.ndarray, group: str,
                           freq_hz: np.ndarray) -> bool:
    """True if the pair ``group``'s bandwidth f0/|Q| is under the point spacing at f0.

    Such a feature lives between two points (or on one): the sweep cannot
    identify it, it can only fit that point's noise.
    """
    if not group.startswith(("pair", "zero_pair")):
        return False
    v = dict(zip(st.names, values, strict=True))
    f0, q = abs(v[f"{group}_f0_hz"]), abs(v[f"{group}_q"])
    spacing = float(np.interp(f0, freq_hz, np.gradient(freq_hz)))
    return f0 / max(q, 1e-300) < spacing


def below_noise(st: Structure, values: np.ndarray, groups: list[str], freq_hz: np.ndarray,
                 sigma: PointSigma) -> bool:
    """True if the groups together change the response by less than one σ at every point.

    Such a near-cancelling doublet is invisible point by point; whatever χ² it
    buys comes from lining up with a run of noise, and a loop design cannot
    see it either.
    """
    names = ("gain",) + tuple(nm for nm in st.names if in_groups(nm, groups))
    v = dict(zip(st.names, values, strict=True), gain=1.0)
    st2 = Structure.from_names(names, 0)
    with np.errstate(all="ignore"):
        d = np.log(response(st2, np.array([v[nm] for nm in names]), 1j * TWO_PI * freq_hz))
    e = np.hypot(d.real / sigma.mag, d.imag / sigma.phase)
    return bool(np.all(np.isfinite(e)) and np.max(e) < 1.0)


def unidentified(st: Structure, ref: Refined) -> list[str]:
    """Pole and zero groups with a parameter whose σ exceeds its value or that the data
    cannot determine at all (:attr:`Refined.undetermined`), vaguest first."""
    out = []
    for i, nm in enumerate(st.names):
        if not nm.startswith(("pole", "pair", "zero")):
            continue
        rel = abs(ref.stderr[i] / ref.values[i]) if ref.values[i] else np.inf
        if nm in ref.undetermined:
            rel = np.inf  # the data cannot determine it at all: vaguer than any σ
        elif not np.isfinite(rel):
            continue
        if rel > 1.0:
            out.append((rel, nm[: -len("_f0_hz")] if nm.endswith("_f0_hz") else nm.rsplit("_", 1)[0]))
    seen: dict[str, float] = {}
    for rel, g in out:
        seen[g] = max(rel, seen.get(g, 0.0))
    return sorted(seen, key=lambda g: -seen[g])
