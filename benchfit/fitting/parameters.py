"""Physical parameters of a pole/zero model, and the model written in them.

The factored form used for refinement, uncertainties and reports::

    H(s) = gain · s^-m · Π (1 + s/ωz) · Π (1 + s/(ω0 Q) + s²/ω0²)      (zeros)
                       / Π (1 + s/ωp) / Π (1 + s/(ω0 Q) + s²/ω0²)      (poles)
                       · exp(−s·τ)

with ω = 2π·f.  Parameter names (stable; ``--fix name=value`` uses them):

``gain``                 low-frequency gain (of s^m·H when there are m integrators)
``pole<i>_hz``           real pole frequencies (negative: right-half-plane pole)
``pair<i>_f0_hz``        complex pole pair natural frequency
``pair<i>_q``            complex pole pair quality factor (negative: unstable pair)
``zero<i>_hz``           real zero frequencies (negative: right-half-plane zero)
``zero_pair<i>_f0_hz``   complex zero pair natural frequency
``zero_pair<i>_q``       complex zero pair Q (negative: right-half-plane pair)
``delay_s``              pure transport delay τ

Each group is numbered from the lowest frequency up.  Integrators (poles at
the origin) are part of the structure, not parameters.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

TWO_PI = 2.0 * np.pi
#: |Im| / |root| below this counts as a real root when converting zpk to factors.
_REAL_TOL = 1e-9


_LABEL_FORMS = (("zero_pair", "_f0_hz", "zero pair {i}, natural frequency"), ("zero_pair", "_q", "zero pair {i}, Q"),
                ("pair", "_f0_hz", "pole pair {i}, natural frequency"), ("pair", "_q", "pole pair {i}, Q"),
                ("pole", "_hz", "real pole {i}"), ("zero", "_hz", "real zero {i}"))


def parameter_label(name: str) -> str:
    """What a person reads for a parameter name: 'pair1_f0_hz' -> 'pole pair 1, natural frequency'.

    The stable names (above) stay in JSON and ``--fix``; every human view uses these.
    """
    if name == "gain":
        return "gain"
    if name == "delay_s":
        return "delay"
    for head, tail, form in _LABEL_FORMS:
        mid = name[len(head):-len(tail)] if name.startswith(head) and name.endswith(tail) else ""
        if mid.isdigit():
            return form.format(i=int(mid))
    return name


@dataclass(frozen=True)
class Structure:
    """How many factors of each kind a model has (fixes the parameter layout)."""

    real_poles: int = 0
    pole_pairs: int = 0
    real_zeros: int = 0
    zero_pairs: int = 0
    integrators: int = 0
    delay: bool = False

    @property
    def names(self) -> tuple[str, ...]:
        out = ["gain"]
        out += [f"pole{i + 1}_hz" for i in range(self.real_poles)]
        for i in range(self.pole_pairs):
            out += [f"pair{i + 1}_f0_hz", f"pair{i + 1}_q"]
        out += [f"zero{i + 1}_hz" for i in range(self.real_zeros)]
        for i in range(self.zero_pairs):
            out += [f"zero_pair{i + 1}_f0_hz", f"zero_pair{i + 1}_q"]
        if self.delay:
            out.append("delay_s")
        return tuple(out)

    @property
    def order(self) -> int:
        """Number of poles, integrators included."""
        return self.real_poles + 2 * self.pole_pairs + self.integrators

    @property
    def n_zeros(self) -> int:
        return self.real_zeros + 2 * self.zero_pairs

    def units(self, gain_unit: str = "") -> tuple[str, ...]:
        """Unit of each parameter, in :attr:`names` order."""
        out = []
        for name in self.names:
            if name == "gain":
                out.append(gain_unit)
            elif name.endswith("_hz"):
                out.append("Hz")
            elif name == "delay_s":
                out.append("s")
            else:
                out.append("")
        return tuple(out)

    def to_dict(self) -> dict:
        return {"real_poles": self.real_poles, "pole_pairs": self.pole_pairs,
                "real_zeros": self.real_zeros, "zero_pairs": self.zero_pairs,
                "integrators": self.integrators, "delay": self.delay}

    @classmethod
    def from_dict(cls, d: dict) -> Structure:
        return cls(**{k: (bool(v) if k == "delay" else int(v)) for k, v in d.items()
                      if k in cls.__dataclass_fields__})

    @classmethod
    def from_names(cls, names: tuple[str, ...], integrators: int = 0) -> Structure:
        """Rebuild the structure from a parameter-name list."""
        return cls(
            real_poles=sum(1 for n in names if n.startswith("pole")),
            pole_pairs=sum(1 for n in names if n.startswith("pair") and n.endswith("_q")),
            real_zeros=sum(1 for n in names if n.startswith("zero") and not n.startswith("zero_pair")),
            zero_pairs=sum(1 for n in names if n.startswith("zero_pair") and n.endswith("_q")),
            integrators=integrators,
            delay="delay_s" in names,
        )


def _split_roots(r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    r = np.asarray(r, dtype=complex)
    isreal = np.abs(r.imag) <= _REAL_TOL * np.maximum(np.abs(r), 1e-300)
    return np.sort(r[isreal].real), r[~isreal & (r.imag > 0)]


def from_zpk(zeros, poles, k, delay_s: float = 0.0, *, integrators: int = 0,
             delay: bool | None = None) -> tuple[Structure, np.ndarray]:
    """Factor a zpk model (rad/s) into :class:`Structure` and parameter values.

    ``poles`` must not contain the ``integrators`` poles at the origin; they
    are given by count.
    """
    zr, zc = _split_roots(zeros)
    pr, pc = _split_roots(poles)
    # Real roots as signed frequencies: root -ω  ->  f = ω/2π (negative for RHP).
    fpr = np.sort(-pr / TWO_PI, kind="stable")
    fpr = fpr[np.argsort(np.abs(fpr), kind="stable")]
    fzr = -zr / TWO_PI
    fzr = fzr[np.argsort(np.abs(fzr), kind="stable")]
    pc = pc[np.argsort(np.abs(pc))]
    zc = zc[np.argsort(np.abs(zc))]
    # gain = lim s^m H(s) as s -> 0 = k · Π(−z) / Π(−p)
    gain = float(np.real(k * np.prod(-np.asarray(zeros, dtype=complex))
                         / np.prod(-np.asarray(poles, dtype=complex))))
    vals = [gain]
    vals += list(fpr)
    for p in pc:
        w0 = abs(p)
        vals += [w0 / TWO_PI, w0 / (-2.0 * p.real) if p.real != 0 else np.inf]
    vals += list(fzr)
    for z in zc:
        w0 = abs(z)
        vals += [w0 / TWO_PI, w0 / (-2.0 * z.real) if z.real != 0 else np.inf]
    has_delay = bool(delay_s) if delay is None else bool(delay)
    if has_delay:
        vals.append(float(delay_s))
    st = Structure(real_poles=len(fpr), pole_pairs=len(pc), real_zeros=len(fzr),
                   zero_pairs=len(zc), integrators=integrators, delay=has_delay)
    return st, np.asarray(vals, dtype=float)


def _quad_roots(f0: float, q: float) -> list[complex]:
    w0 = TWO_PI * f0
    a = -w0 / (2.0 * q)
    disc = np.sqrt(complex(1.0 / (4.0 * q * q) - 1.0))
    r1, r2 = a + w0 * disc, a - w0 * disc
    return [complex(r1), complex(r2)]


def to_zpk(st: Structure, values: np.ndarray) -> tuple[np.ndarray, np.ndarray, float, float]:
    """Inverse of :func:`from_zpk`: zeros, poles (integrators included), k, delay_s."""
    v = np.asarray(values, dtype=float)
    i = 1
    poles: list[complex] = [0j] * st.integrators
    for _ in range(st.real_poles):
        poles.append(complex(-TWO_PI * v[i]))
        i += 1
    for _ in range(st.pole_pairs):
        poles += _quad_roots(v[i], v[i + 1])
        i += 2
    zeros: list[complex] = []
    for _ in range(st.real_zeros):
        zeros.append(complex(-TWO_PI * v[i]))
        i += 1
    for _ in range(st.zero_pairs):
        zeros += _quad_roots(v[i], v[i + 1])
        i += 2
    delay = float(v[i]) if st.delay else 0.0
    z = np.asarray(zeros, dtype=complex)
    p = np.asarray(poles, dtype=complex)
    pn = p[p != 0]
    k = float(v[0] * np.real(np.prod(-pn) / np.prod(-z)))
    return z, p, k, delay


def _groups(st: Structure, v: np.ndarray):
    """Split values (..., P) into named groups of (..., n) arrays."""
    i = 1
    out = {"gain": v[..., 0]}
    out["pr"] = v[..., i: i + st.real_poles]
    i += st.real_poles
    out["pp_f"] = v[..., i: i + 2 * st.pole_pairs: 2]
    out["pp_q"] = v[..., i + 1: i + 2 * st.pole_pairs: 2]
    i += 2 * st.pole_pairs
    out["zr"] = v[..., i: i + st.real_zeros]
    i += st.real_zeros
    out["zp_f"] = v[..., i: i + 2 * st.zero_pairs: 2]
    out["zp_q"] = v[..., i + 1: i + 2 * st.zero_pairs: 2]
    i += 2 * st.zero_pairs
    out["tau"] = v[..., i] if st.delay else None
    return out


def response(st: Structure, values: np.ndarray, s: np.ndarray) -> np.ndarray:
    """H at ``s`` (rad/s); ``values`` may be (P,) or (N, P) -> (N, len(s)), complex."""
    v = np.asarray(values, dtype=float)
    s = np.asarray(s, dtype=complex)
    g = _groups(st, v)
    lead = v.shape[:-1]
    sb = s.reshape((1,) * len(lead) + (-1, 1))

    def real_terms(f):
        if f.shape[-1] == 0:
            return 1.0
        return np.prod(1.0 + sb / (TWO_PI * f[..., None, :]), axis=-1)

    def pair_terms(f, q):
        if f.shape[-1] == 0:
            return 1.0
        x = sb / (TWO_PI * f[..., None, :])
        return np.prod(1.0 + x / q[..., None, :] + x * x, axis=-1)

    num = real_terms(g["zr"]) * pair_terms(g["zp_f"], g["zp_q"])
    den = real_terms(g["pr"]) * pair_terms(g["pp_f"], g["pp_q"])
    out = g["gain"][..., None] * (num / den) * np.ones(lead + s.shape)
    if st.integrators:
        out = out / s ** st.integrators
    if st.delay:
        out = out * np.exp(-g["tau"][..., None] * s)
    return out


def log_jacobian(st: Structure, values: np.ndarray, s: np.ndarray) -> np.ndarray:
    """d log H / d parameter, shape (len(s), P), complex (analytic)."""
    v = np.asarray(values, dtype=float)
    s = np.asarray(s, dtype=complex)
    jac = np.empty((s.shape[0], v.shape[0]), dtype=complex)
    jac[:, 0] = 1.0 / v[0]
    i = 1

    def d_real(f):  # d/df log(1 + s/ω), ω = 2πf
        w = TWO_PI * f
        return -TWO_PI * s / (w * (w + s))

    def d_pair(f, q):  # d/df0 and d/dQ of log(1 + s/(ω0 Q) + s²/ω0²)
        w = TWO_PI * f
        d = 1.0 + s / (w * q) + (s / w) ** 2
        dw = (-s / (w * w * q) - 2.0 * s * s / w ** 3) / d
        dq = (-s / (w * q * q)) / d
        return TWO_PI * dw, dq

    for _ in range(st.real_poles):
        jac[:, i] = -d_real(v[i])
        i += 1
    for _ in range(st.pole_pairs):
        a, b = d_pair(v[i], v[i + 1])
        jac[:, i], jac[:, i + 1] = -a, -b
        i += 2
    for _ in range(st.real_zeros):
        jac[:, i] = d_real(v[i])
        i += 1
    for _ in range(st.zero_pairs):
        a, b = d_pair(v[i], v[i + 1])
        jac[:, i], jac[:, i + 1] = a, b
        i += 2
    if st.delay:
        jac[:, i] = -s
    return jac


def renumbering(st: Structure, values: np.ndarray) -> np.ndarray:
    """Index permutation that numbers each group from the lowest frequency up.

    ``values[perm]`` are the same model's values with real poles, pole pairs,
    real zeros and zero pairs each in order of |frequency| (stable for ties),
    the order :func:`from_zpk` gives and the parameter names promise; the
    refinement moves values and can leave ``pole1_hz`` above ``pole2_hz``.
    """
    v = np.asarray(values, dtype=float)
    perm = np.arange(v.shape[0])
    i = 1
    for n, width in ((st.real_poles, 1), (st.pole_pairs, 2), (st.real_zeros, 1),
                     (st.zero_pairs, 2)):
        starts = i + width * np.arange(n)
        order = starts[np.argsort(np.abs(v[starts]), kind="stable")]
        for k in range(width):
            perm[starts + k] = order + k
        i += width * n
    return perm
