"""Named pole and zero groups of a factored model: finding them and cutting them out.

A *group* is one factor of the model in :mod:`benchfit.fitting.parameters`:
``pole3`` (a real pole), ``pair2`` (a complex pole pair), ``zero1``,
``zero_pair1``.  The functions here only look at a structure and its values
(which groups lie above the band, which nearly cancel, which the data cannot
locate) or build the structure without some of them; whether a group may go
is decided in :mod:`benchfit.fitting.selection`.
"""

from __future__ import annotations

import re

import numpy as np

from benchfit.errors import InputError
from benchfit.fitting.ordering import magnitude_range
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


def with_pole(st: Structure, values: np.ndarray, f_hz: float) -> tuple[Structure, np.ndarray]:
    """Structure and values with a real pole at ``f_hz`` added (numbered by frequency)."""
    v = dict(zip(st.names, values, strict=True))
    rp = sorted([v[f"pole{i}_hz"] for i in range(1, st.real_poles + 1)] + [f_hz], key=abs)
    st2 = Structure(st.real_poles + 1, st.pole_pairs, st.real_zeros, st.zero_pairs,
                    st.integrators, st.delay)
    rest = [x for nm, x in zip(st.names, values, strict=True)
            if nm != "gain" and not nm.startswith("pole")]
    return st2, np.asarray([v["gain"], *rp, *rest], dtype=float)


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


_GROUP_NAME = re.compile(r"^(pole|pair|zero_pair|zero)(\d+)_(hz|f0_hz|q)$")
_KIND_KEY = {"pole": "hz", "zero": "hz", "pair": ("f0_hz", "q"), "zero_pair": ("f0_hz", "q")}


def _needed(names: dict[str, str]) -> dict[str, int]:
    """Groups of each kind the parameter names (name -> option) ask for, e.g. pole3_hz -> 3.

    Raises InputError naming the option for a name no model of this form has.
    """
    need = {"pole": 0, "pair": 0, "zero": 0, "zero_pair": 0}
    for name, option in names.items():
        if name in ("gain", "delay_s"):
            continue
        m = _GROUP_NAME.match(name)
        key = None if m is None else _KIND_KEY[m.group(1)]
        if m is None or int(m.group(2)) < 1 or not (
                m.group(3) == key or (isinstance(key, tuple) and m.group(3) in key)):
            raise InputError(f"no parameter {name!r}: expected gain, pole<i>_hz, "
                             "pair<i>_f0_hz, pair<i>_q, zero<i>_hz, zero_pair<i>_f0_hz, "
                             "zero_pair<i>_q or delay_s (i from 1, lowest frequency first)",
                             source=option)
        need[m.group(1)] = max(need[m.group(1)], int(m.group(2)))
    return need


def _split_pairs(real: list[float], pairs: list[tuple[float, float]], need_real: int,
                 need_pairs: int) -> tuple[list[float], list[tuple[float, float]]] | None:
    """Real roots and pairs rearranged (same count of roots) so there are at least
    ``need_real`` real ones and ``need_pairs`` pairs, or None when impossible.

    A pair becomes two real roots at its f0 (critically damped, Q = 0.5: the
    nearest real pair to any pair); two real roots of one sign, neighbours in
    frequency, become the pair with the same roots (f0 = √(f1·f2),
    Q = f0/(f1 + f2) ≤ 0.5).  The refinement moves them from there.
    """
    real, pairs = sorted(real, key=abs), sorted(pairs)
    if need_real + 2 * need_pairs > len(real) + 2 * len(pairs):
        return None
    while len(real) < need_real:
        f0, _ = min(pairs, key=lambda p: abs(p[1]))  # the most damped pair
        pairs.remove((f0, _))
        real = sorted([*real, f0, f0], key=abs)
    while len(pairs) < need_pairs:
        cands = [(abs(np.log(abs(real[i + 1] / real[i]))), i) for i in range(len(real) - 1)
                 if real[i] * real[i + 1] > 0]
        if not cands:
            return None
        _, i = min(cands)
        f1, f2 = real[i], real[i + 1]
        f0 = float(np.sqrt(f1 * f2))
        pairs = sorted([*pairs, (f0, float(np.sign(f1) * f0 / abs(f1 + f2)))])
        real = real[:i] + real[i + 2:]
    return real, pairs


def conform(st: Structure, values: np.ndarray, fixed: dict[str, float],
            bounds: dict[str, tuple[float, float]], order_given: bool = False
            ) -> tuple[Structure, np.ndarray]:
    """The structure rearranged so every parameter the user fixes or bounds exists.

    ``--fix pole2_hz=350k`` on a model whose two poles came out of vector
    fitting as a complex pair splits the pair into two real poles; ``pair1_q``
    on two real poles merges them into a pair (:func:`_split_pairs`); a
    ``zero<i>`` the model lacks is added at the value asked (the zeros' count
    is not the order); a bounded ``delay_s`` adds the delay.  The number of
    poles never changes.

    Raises
    ------
    InputError
        Naming the option (``--fix``/``--bound``) when a name is not a parameter
        name, or when the model's poles cannot hold the groups asked for.
    """
    names = {**{k: "--bound" for k in bounds}, **{k: "--fix" for k in fixed}}
    need = _needed(names)
    v = dict(zip(st.names, values, strict=True))
    rp = [v[f"pole{i}_hz"] for i in range(1, st.real_poles + 1)]
    pp = [(v[f"pair{i}_f0_hz"], v[f"pair{i}_q"]) for i in range(1, st.pole_pairs + 1)]
    rz = [v[f"zero{i}_hz"] for i in range(1, st.real_zeros + 1)]
    zp = [(v[f"zero_pair{i}_f0_hz"], v[f"zero_pair{i}_q"]) for i in range(1, st.zero_pairs + 1)]
    if need["pole"] <= len(rp) and need["pair"] <= len(pp) and need["zero"] <= len(rz) \
            and need["zero_pair"] <= len(zp) and ("delay_s" not in names or st.delay):
        return _held_in_place(st, values, fixed, bounds)
    poles = _split_pairs(rp, pp, need["pole"], need["pair"])
    if poles is None:
        asked = [n for n in names if n.startswith(("pole", "pair"))]
        how = "the order given" if order_given else "the order the data chose"
        raise InputError(f"no parameter {asked[-1]!r}: the model has {len(rp) + 2 * len(pp)} pole(s) "
                         f"({how}); {need['pole']} real pole(s) and {need['pair']} pair(s) need "
                         f"{need['pole'] + 2 * need['pair']} (raise --order)",
                         source=names[asked[-1]])
    rp, pp = poles
    n_zeros = need["zero"] + 2 * need["zero_pair"]
    if n_zeros > max(st.order, st.n_zeros):
        asked = [n for n in names if n.startswith("zero")]
        raise InputError(f"no parameter {asked[-1]!r}: a model of {st.order} pole(s) has at most "
                         f"{max(st.order, st.n_zeros)} zero(s); {n_zeros} asked",
                         source=names[asked[-1]])
    while len(rz) + 2 * len(zp) < n_zeros:
        # A zero the model lacks: start it where the user puts it.
        key = f"zero{len(rz) + 1}_hz"
        lo, hi = bounds.get(key, (-np.inf, np.inf))
        start = fixed.get(key, np.clip(np.sqrt(abs(lo * hi)) if np.isfinite(lo * hi) else
                                       (lo if np.isfinite(lo) else hi), lo, hi))
        rz.append(float(start) if np.isfinite(start) and start else 1e30)
    zeros = _split_pairs(rz, zp, need["zero"], need["zero_pair"])
    if zeros is None:
        asked = [n for n in names if n.startswith("zero")]
        raise InputError(f"no parameter {asked[-1]!r}: cannot arrange the model's zeros to "
                         "hold it", source=names[asked[-1]])
    rz, zp = zeros
    delay = st.delay or "delay_s" in names
    tau = v.get("delay_s", 0.0)
    if "delay_s" in bounds and not st.delay:
        tau = float(np.clip(tau, *bounds["delay_s"]))
    st2 = Structure(len(rp), len(pp), len(rz), len(zp), st.integrators, delay)
    vals = [v["gain"], *rp, *[x for p in pp for x in p], *rz, *[x for p in zp for x in p]]
    return _held_in_place(st2, np.asarray(vals + ([tau] if delay else []), dtype=float), fixed,
                          bounds)


def bound_target(lo: float, hi: float) -> float | None:
    """The frequency a bound points at, for choosing the group it holds (None: no place).

    The middle of the allowed magnitudes in log terms (√(a·b)), or the finite edge
    of a one-sided range (``:250`` points at 250 Hz); a range from 0 to infinity (a
    sign only) points nowhere.
    """
    if lo < 0 < hi:  # spans zero: the edge the user wrote
        edge = hi if np.isfinite(hi) else -lo
        return float(edge) if np.isfinite(edge) else None
    a, b = magnitude_range(lo, hi)
    if a > 0 and np.isfinite(b):
        return float(np.sqrt(a * b))
    if a > 0:
        return float(a)
    return float(b) if np.isfinite(b) and b > 0 else None


def _held_in_place(st: Structure, values: np.ndarray, fixed: dict[str, float],
                   bounds: dict[str, tuple[float, float]] | None = None
                   ) -> tuple[Structure, np.ndarray]:
    """Values with the group nearest (in log frequency) to each fixed frequency, or to the
    range a bound allows (:func:`bound_target`), moved to the held name's place.

    Holding ``pole1_hz`` at 350 kHz when vector fitting put the poles at 1 kHz
    and 350 kHz must hold the 350 kHz pole, not drag the 1 kHz one up and
    send the other looking for it (it wandered off to −9e11 Hz).
    """
    targets = dict(fixed)
    for name, (lo, hi) in (bounds or {}).items():
        t = bound_target(float(lo), float(hi))
        if name not in targets and t is not None:
            targets[name] = t
    v = np.array(values, dtype=float)
    names = st.names
    for name, target in targets.items():
        m = _GROUP_NAME.match(name)
        if m is None or m.group(3) == "q" or name not in names or not target:
            continue
        kind, key = m.group(1), m.group(3)
        same = [i for i, nm in enumerate(names)
                if (mm := _GROUP_NAME.match(nm)) and mm.group(1) == kind and mm.group(3) == key
                and nm not in targets]
        if not same:
            continue
        here = names.index(name)
        best = min(same + [here], key=lambda i: abs(np.log(abs(v[i] / target))) if v[i] else np.inf)
        if best != here:
            width = 2 if key == "f0_hz" else 1  # a pair moves with its Q
            a, b = v[here:here + width].copy(), v[best:best + width].copy()
            v[here:here + width], v[best:best + width] = b, a
    return st, v
