"""SPICE subcircuit of a PlantModel, built only from standard SPICE3 elements.

The rational part is realised as a cascade of first- and second-order
sections.  Each state variable is the voltage on a 1 F capacitor (with a
1e12 ohm leak so every node has a DC path) charged by voltage-controlled
current sources (G elements): the capacitor current ``C dx/dt`` equals the
sum of the injected currents, so ``dx/dt = A x + B u``.  Each section's
output ``y = C x + D u`` is formed by G sources feeding a 1 ohm resistor.

A second-order section ``(b2 s² + b1 s + b0) / (s² + a1 s + a0)`` uses the
scaled form (w > 0 is the section's natural frequency, or a stand-in when it
has integrators)::

    x1' = w·x2
    x2' = −(a0/w)·x1 − a1·x2 + w·u
    y   = c1·x1 + c2·x2 + b2·u,   c1 = (b0 − b2·a0)/w²,  c2 = (b1 − b2·a1)/w

so every coefficient is of the order of the section's own frequency and the
state voltages stay near the input's size (no state sits at micro-volts).
Poles at the origin are exact integrators apart from the 1e12 ohm leak,
which moves them to −1e−12 rad/s.

The pure delay uses the SPICE3 lossless transmission line (``T`` element)
terminated in its characteristic impedance, so nothing reflects and the far
end sees the near-end voltage delayed by ``TD``.

Ports: ``in`` (1e12 ohm to ground, otherwise no load) and ``out`` (ideal
voltage source), both referred to the global ground node ``0``.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from benchfit.errors import InputError
from benchfit.fileio import write_text_atomic
from benchfit.fitting.model import PlantModel
from benchfit.output.choices import DESIGN_PARTS

#: Leak resistance across each state capacitor (ohm): gives every node a DC path.
LEAK_OHM = 1e12
#: Characteristic impedance of the delay line (ohm); any value works when matched.
DELAY_Z0_OHM = 50.0

_NAME_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,31}$")


@dataclass(frozen=True)
class _Section:
    """One real-coefficient section: numerator b (highest power first), denominator a (monic)."""

    b: tuple[float, ...]
    a: tuple[float, ...]


def _real_groups(values: np.ndarray, what: str) -> tuple[list[complex], list[float]]:
    """Split roots into complex pairs (one representative with imag > 0) and real roots."""
    vals = np.asarray(values, dtype=complex)
    tol = 1e-9 * max(1.0, float(np.max(np.abs(vals)))) if vals.size else 0.0
    real = sorted(float(v.real) for v in vals if abs(v.imag) <= tol)
    upper = [v for v in vals if v.imag > tol]
    lower = [v for v in vals if v.imag < -tol]
    if len(upper) != len(lower):
        raise InputError(f"the model's {what} are not in conjugate pairs; a real circuit cannot realise it")
    for u in upper:
        d = np.abs(np.asarray(lower) - np.conj(u))
        if d.min() > 1e-6 * max(1.0, abs(u)):
            raise InputError(f"{what} {u:.6g} has no conjugate partner; a real circuit cannot realise it")
    return sorted(upper, key=abs), real


def _sections(model: PlantModel) -> list[_Section]:
    """Group poles and zeros into real first/second-order sections (nearest zeros to nearest poles)."""
    if len(model.zeros) > len(model.poles):
        raise InputError(
            f"the model has {len(model.zeros)} zeros but {len(model.poles)} poles; a state-space "
            "circuit needs at least as many poles as zeros (add a pole far above the band)")
    if len(model.poles) == 0:
        return []
    p_pairs, p_real = _real_groups(model.poles, "poles")
    z_pairs, z_real = _real_groups(model.zeros, "zeros")
    # Denominators: each complex pair, then real poles two by two, one left over at most.
    dens: list[list[float]] = []
    for p in p_pairs:
        dens.append([1.0, -2.0 * p.real, abs(p) ** 2])
    p_real = sorted(p_real, key=abs)
    while len(p_real) >= 2:
        p1, p2 = p_real.pop(0), p_real.pop(0)
        dens.append([1.0, -(p1 + p2), p1 * p2])
    if p_real:
        dens.append([1.0, -p_real[0]])
    dens.sort(key=lambda a: np.sqrt(abs(a[-1])) if len(a) == 3 else abs(a[-1]))
    # Numerators: complex zero pairs need a second-order section; real zeros fill the rest.
    caps = [len(a) - 1 for a in dens]
    nums: list[list[complex]] = [[] for _ in dens]
    for z in sorted(z_pairs, key=abs):
        i = next(i for i, c in enumerate(caps) if c - len(nums[i]) >= 2)
        nums[i] += [z, np.conj(z)]
    for z in sorted(z_real, key=abs):
        i = next(i for i, c in enumerate(caps) if c - len(nums[i]) >= 1)
        nums[i].append(complex(z))
    out = []
    for a, zs in zip(dens, nums, strict=True):
        b = np.real(np.poly(zs)) if zs else np.array([1.0])
        b = np.concatenate([np.zeros(len(a) - len(b)), b])
        out.append(_Section(b=tuple(float(x) for x in b), a=tuple(float(x) for x in a)))
    return out


def _section_gain_scale(sec: _Section, omega: np.ndarray) -> float:
    """1 / the section's peak magnitude on the grid, so intermediate signals stay near unit size."""
    s = 1j * omega
    h = np.polyval(sec.b, s) / np.polyval(sec.a, s)
    peak = float(np.max(np.abs(h[np.isfinite(h)]))) if np.any(np.isfinite(h)) else 1.0
    return 1.0 / peak if peak > 0 and np.isfinite(peak) else 1.0


def _fmt(x: float) -> str:
    return f"{x:.12g}"


def _characteristic_omega(model: PlantModel) -> np.ndarray:
    """A log grid of angular frequencies spanning every pole and zero (rad/s)."""
    mags = np.abs(np.concatenate([model.poles, model.zeros]))
    mags = mags[mags > 0]
    lo, hi = (float(mags.min()), float(mags.max())) if mags.size else (1.0, 1.0)
    return np.logspace(np.log10(lo) - 2, np.log10(hi) + 2, 400)


def spice_subcircuit(model: PlantModel, name: str = "plant", *, title: str | None = None) -> str:
    """The text of a ``.SUBCKT name in out`` realising ``model``.

    Parameters
    ----------
    model
        Pole/zero/gain model (s in rad/s) with optional delay in s.  Needs at
        least as many poles as zeros.
    name
        Subcircuit name: a letter then letters, digits or ``_`` (at most 32).
    title
        Optional first comment line.

    Returns
    -------
    str
        Netlist text (SPICE3 syntax, one element per line).

    Raises
    ------
    InputError
        For an improper model, unpaired complex roots or a bad name.
    """
    if not _NAME_RE.match(name):
        raise InputError(f"subcircuit name {name!r}: expected a letter then letters, digits or _ "
                         "(at most 32 characters)", source="--name")
    sections = _sections(model)
    omega = _characteristic_omega(model)
    lines = [f"* {title or 'benchfit plant model'}",
             f"* H(s) = k * prod(s - z) / prod(s - p) * exp(-s*tau); order {model.order}, "
             f"zeros {len(model.zeros)}, k = {_fmt(model.k)}, tau = {_fmt(model.delay_s)} s",
             "* Realised as a cascade of 1st/2nd-order state-variable sections:",
             "* each state is the voltage on a 1 F capacitor charged by G sources.",
             "* Ports: in (1e12 ohm to node 0), out (ideal source); both referred to node 0.",
             ]
    for src in model.provenance.sources:
        lines.append(f"* source: {_comment_safe(src)}")
    lines.append(f".SUBCKT {name} in out")
    lines.append(f"Rin in 0 {_fmt(LEAK_OHM)}")
    gain_left = model.k
    node = "in"
    n_el = 0

    def el(kind: str, *fields: str) -> None:
        nonlocal n_el
        n_el += 1
        lines.append(f"{kind}{n_el} " + " ".join(fields))

    for i, sec in enumerate(sections, start=1):
        g = _section_gain_scale(sec, omega)
        gain_left /= g
        b = [g * x for x in sec.b]
        x1, x2, y = f"x{i}a", f"x{i}b", f"y{i}"
        lines.append(f"* section {i}: ({' '.join(_fmt(x) for x in b)}) / "
                     f"({' '.join(_fmt(x) for x in sec.a)})")
        if len(sec.a) == 3:
            a1, a0 = sec.a[1], sec.a[2]
            b2, b1, b0 = b
            w = np.sqrt(a0) if a0 > 0 else (abs(a1) if a1 != 0 else 1.0)
            if a0 < 0:
                w = np.sqrt(-a0)
            c1 = (b0 - b2 * a0) / w ** 2
            c2 = (b1 - b2 * a1) / w
            for xn in (x1, x2):
                el("C", xn, "0", "1")
                el("R", xn, "0", _fmt(LEAK_OHM))
            el("G", "0", x1, x2, "0", _fmt(w))                    # x1' = w x2
            el("G", "0", x2, x1, "0", _fmt(-a0 / w))              # x2' += -(a0/w) x1
            el("G", "0", x2, x2, "0", _fmt(-a1))                  # x2' += -a1 x2
            el("G", "0", x2, node, "0", _fmt(w))                  # x2' += w u
            terms = [(x1, c1), (x2, c2), (node, b2)]
        else:
            a0 = sec.a[1]
            b1, b0 = b
            w = abs(a0) if a0 != 0 else 1.0
            c = (b0 - b1 * a0) / w
            el("C", x1, "0", "1")
            el("R", x1, "0", _fmt(LEAK_OHM))
            el("G", "0", x1, x1, "0", _fmt(-a0))                  # x' = -a0 x + w u
            el("G", "0", x1, node, "0", _fmt(w))
            terms = [(x1, c), (node, b1)]
        el("R", y, "0", "1")                                     # summing node: V = sum of currents
        for ctrl, coef in terms:
            if coef != 0.0:
                el("G", "0", y, ctrl, "0", _fmt(coef))
        node = y
    out_gain = gain_left
    if model.delay_s > 0:
        lines.append(f"* pure delay {_fmt(model.delay_s)} s: matched lossless line")
        el("E", "dl_in", "0", node, "0", _fmt(out_gain))
        el("T", "dl_in", "0", "dl_out", "0", f"Z0={_fmt(DELAY_Z0_OHM)}", f"TD={_fmt(model.delay_s)}")
        el("R", "dl_out", "0", _fmt(DELAY_Z0_OHM))
        el("E", "out", "0", "dl_out", "0", "1")
    else:
        el("E", "out", "0", node, "0", _fmt(out_gain))
    lines.append(f".ENDS {name}")
    return "\n".join(lines) + "\n"


def _comment_safe(text: str) -> str:
    # A newline in a file name would end the comment and inject a netlist line.
    return "".join(ch if ch.isprintable() else "?" for ch in str(text))


def write_spice(model: PlantModel, path: str | os.PathLike, name: str = "plant") -> Path:
    """Write :func:`spice_subcircuit` of ``model`` to ``path`` atomically."""
    return write_text_atomic(path, spice_subcircuit(model, name))



def model_from_file(path: str | os.PathLike, part: str = "plant") -> PlantModel:
    """The PlantModel in a model, fit-result or design JSON file.

    Parameters
    ----------
    path
        JSON file: a model, a fit result (its ``model``), or a design.
    part
        For a design file, which model: one of :data:`DESIGN_PARTS`
        (snapped parts unless ``-ideal``).  Ignored for other files.

    Raises
    ------
    InputError
        When the file holds no such model (e.g. the plant of a design made
        from measured data, which has no model).
    """
    from benchfit.fileio import malformed_as_input_error, read_json

    d = read_json(path)
    with malformed_as_input_error(path, "model or design file"):
        if d.get("kind") != "design":
            try:
                return PlantModel.from_dict(d)
            except InputError as e:
                raise InputError(e.message, source=str(path)) from None
        if part not in DESIGN_PARTS:
            raise InputError(f"{part!r}; expected one of {', '.join(DESIGN_PARTS)}", source="--part")
        which = "ideal" if part.endswith("-ideal") else "snapped"
        base = part.removesuffix("-ideal")
        if base == "plant":
            obj = d.get("plant")
        elif base == "compensator":
            obj = (d.get("compensator") or {}).get(which)
        else:
            obj = (d.get("loop_model") or {}).get(which)
        if not isinstance(obj, dict) or "poles" not in obj:
            what = "measured data, not a model" if base in ("plant", "loop") else "missing"
            raise InputError(f"the design's {part} is {what}; nothing to export", source=str(path))
        try:
            return PlantModel.from_dict(obj)
        except InputError as e:
            raise InputError(f"{part}: {e.message}", source=str(path)) from None
