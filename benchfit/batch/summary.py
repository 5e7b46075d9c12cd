"""A lot at a glance: counts, yield, worst units, percentiles of each figure, histograms."""

from __future__ import annotations

import io
import math
import os
import re
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.batch.limits import Limits
from benchfit.batch.table import PARAM_PREFIX
from benchfit.fileio import as_float, write_bytes_atomic
from benchfit.fitting.parameters import parameter_label
from benchfit.output.style import ENG_FORMATTER, MEASURED, TARGET, log_axis, new_figure, styled
from benchfit.provenance import Provenance

#: Figures summarised when present, in report order.
FIGURES = ("phase_margin_deg", "gain_margin_db", "crossover_hz", "phase_crossover_hz",
           "delay_margin_s", "modulus_margin", "fit_rms_db", "fit_rms_deg")
PERCENTILES = (1, 5, 50, 95, 99)
_WORST_FIGURES = ("phase_margin_deg", "gain_margin_db", "crossover_hz", "fit_rms_db")


def _figure_stats(values: np.ndarray) -> dict[str, float]:
    v = values[np.isfinite(values)]
    out: dict[str, float] = {"n": int(v.size), "n_infinite": int(np.isinf(values).sum())}
    if v.size:
        out.update(min=float(v.min()), max=float(v.max()), mean=float(v.mean()),
                   std=float(v.std(ddof=1)) if v.size > 1 else 0.0)
        # numpy's default (linear) percentile definition, type 7 of Hyndman & Fan.
        for p, q in zip(PERCENTILES, np.percentile(v, PERCENTILES), strict=True):
            out[f"p{p}"] = float(q)
    return out


def _reason_kind(reason: str) -> str:
    """'phase margin 38.2 deg < 45' -> 'phase margin' (the limit's name)."""
    head = re.split(r" (?=[-+]?\d)", reason.strip(), maxsplit=1)[0]
    return head.strip() or reason.strip()


@dataclass(frozen=True)
class LotSummary:
    """Counts, yield, worst units and the spread of each figure over a lot.

    Parameters
    ----------
    total
        Rows in the lot.
    counts
        Rows by status (pass, fail, measured, error).
    yield_fraction
        pass / (pass + fail); None when nothing was judged.
    figures
        Per figure: n, n_infinite, min, max, mean, std and percentiles p1..p99
        over the rows where it is finite (error rows excluded).
    worst
        The units with the least phase margin (else the worst fit), as short dicts.
    fail_reasons
        How many units failed each limit.
    errors
        Up to 20 error rows (file and error text).
    provenance
        The table summarised.
    """

    total: int
    counts: dict[str, int]
    yield_fraction: float | None
    figures: dict[str, dict[str, float]]
    worst: list[dict[str, Any]]
    fail_reasons: dict[str, int]
    errors: list[dict[str, str]]
    provenance: Provenance = field(default_factory=lambda: Provenance(step="lot_summary"))

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "lot_summary", "total": self.total, "counts": dict(self.counts),
                "yield_fraction": self.yield_fraction, "figures": self.figures,
                "worst": self.worst, "fail_reasons": dict(self.fail_reasons),
                "errors": self.errors, "provenance": self.provenance.to_dict()}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> LotSummary:
        y = d.get("yield_fraction")
        return cls(total=int(d["total"]), counts={k: int(v) for k, v in d["counts"].items()},
                   yield_fraction=None if y is None else float(y),
                   figures={k: {s: as_float(x) for s, x in v.items()} for k, v in d["figures"].items()},
                   worst=[{k: as_float(v) if k in _WORST_FIGURES else v for k, v in w.items()}
                          for w in d.get("worst", [])],
                   fail_reasons=dict(d.get("fail_reasons", {})),
                   errors=list(d.get("errors", [])),
                   provenance=Provenance.from_dict(d.get("provenance")))

    def report(self) -> str:
        """A short plain-text account of the lot."""
        c = self.counts
        lines = [f"{self.total} sweeps: {c.get('pass', 0)} pass, {c.get('fail', 0)} fail, "
                 f"{c.get('measured', 0)} measured (no limits), {c.get('error', 0)} error"]
        if self.yield_fraction is not None:
            lines.append(f"yield {100 * self.yield_fraction:.1f} %")
        if self.fail_reasons:
            lines.append("failed limits: " + ", ".join(f"{k} ({n})" for k, n in self.fail_reasons.items()))
        if self.figures:
            lines.append(f"{'figure':<22}{'n':>6}{'min':>12}{'p5':>12}{'p50':>12}{'p95':>12}{'max':>12}")
            for name, st in self.figures.items():
                if not st.get("n"):
                    continue
                lines.append(f"{name:<22}{st['n']:>6}" + "".join(
                    f"{st[k]:>12.4g}" for k in ("min", "p5", "p50", "p95", "max")))
        if self.worst:
            lines.append("worst units:")
            for w in self.worst:
                figs = ", ".join(f"{k} {v:.4g}" for k, v in w.items()
                                 if isinstance(v, float) and math.isfinite(v))
                lines.append(f"  {w['unit']} [{w['status']}] {figs}" + (
                    f" ({w['reason']})" if w.get("reason") else ""))
        for e in self.errors[:5]:
            lines.append(f"error: {e['file']}: {e['error']}")
        if len(self.errors) > 5:
            lines.append(f"... {len(self.errors) - 5} more errors in the table")
        return "\n".join(lines)


def summarise(rows: Sequence[dict[str, Any]], *, n_worst: int = 10,
              source: str = "") -> LotSummary:
    """Summarise result rows (as :func:`benchfit.batch.table.read_table` returns them)."""
    counts = Counter(r.get("status") or "error" for r in rows)
    judged = counts.get("pass", 0) + counts.get("fail", 0)
    good = [r for r in rows if r.get("status") != "error"]
    names = list(FIGURES) + sorted({k for r in rows for k in r if k.startswith(PARAM_PREFIX)})
    figures = {}
    for name in names:
        vals = np.array([math.nan if r.get(name) is None else float(r[name]) for r in good])
        if vals.size and not np.all(np.isnan(vals)):
            figures[name] = _figure_stats(vals)
    key = "phase_margin_deg" if "phase_margin_deg" in figures else "fit_rms_db"
    sign = 1.0 if key == "phase_margin_deg" else -1.0  # least margin, or largest residual
    ranked = sorted((r for r in good if r.get(key) is not None and not math.isnan(r[key])),
                    key=lambda r: (sign * r[key], r["file"]))
    worst = [{"unit": r.get("unit"), "file": r["file"], "status": r.get("status"),
              "reason": r.get("reason") or "", **{k: r.get(k) for k in _WORST_FIGURES if r.get(k) is not None}}
             for r in ranked[:n_worst]]
    reasons = Counter(_reason_kind(x) for r in rows if r.get("status") == "fail"
                      for x in (r.get("reason") or "").split("; ") if x)
    errors = [{"file": r["file"], "error": r.get("error") or ""}
              for r in rows if r.get("status") == "error"][:20]
    return LotSummary(total=len(rows), counts=dict(sorted(counts.items())),
                      yield_fraction=counts.get("pass", 0) / judged if judged else None,
                      figures=figures, worst=worst, fail_reasons=dict(reasons.most_common()),
                      errors=errors,
                      provenance=Provenance(step="lot_summary", sources=(source,) if source else (),
                                            settings={"n_worst": n_worst}))


_LIMIT_LINES = {
    "phase_margin_deg": lambda lim: [lim.min_phase_margin_deg],
    "gain_margin_db": lambda lim: [lim.min_gain_margin_db],
    "crossover_hz": lambda lim: list(lim.crossover_hz.to_list()) if lim.crossover_hz else [],
    "delay_margin_s": lambda lim: [lim.min_delay_margin_s],
    "modulus_margin": lambda lim: [lim.min_modulus_margin],
    "fit_rms_db": lambda lim: [lim.max_rms_db],
    "fit_rms_deg": lambda lim: [lim.max_rms_deg],
}


def _limit_values(name: str, limits: Limits | None) -> list[float]:
    if limits is None:
        return []
    if name in _LIMIT_LINES:
        vals = _LIMIT_LINES[name](limits)
    elif name.startswith(PARAM_PREFIX) and name[len(PARAM_PREFIX):] in limits.parameters:
        vals = limits.parameters[name[len(PARAM_PREFIX):]].to_list()
    else:
        vals = []
    return [v for v in vals if v is not None]


#: What a person reads for each summarised column: (label, unit symbol; '' for a plain ratio).
_COLUMN_LABELS = {"phase_margin_deg": ("Phase margin", "deg"), "gain_margin_db": ("Gain margin", "dB"),
                  "crossover_hz": ("Crossover", "Hz"), "phase_crossover_hz": ("Phase crossover", "Hz"),
                  "delay_margin_s": ("Delay margin", "s"), "modulus_margin": ("Modulus margin", ""),
                  "fit_rms_db": ("Fit residual rms, magnitude", "dB"),
                  "fit_rms_deg": ("Fit residual rms, phase", "deg")}


def column_label(name: str) -> tuple[str, str]:
    """('Crossover', 'Hz') for 'crossover_hz'; fitted parameters by their readable names.

    The result table keeps its stable column names; pictures and text use these.
    """
    if name in _COLUMN_LABELS:
        return _COLUMN_LABELS[name]
    if name.startswith(PARAM_PREFIX):
        key = name[len(PARAM_PREFIX):]
        unit = "Hz" if key.endswith("_hz") else ("s" if key.endswith("_s") else "")
        label = parameter_label(key)
        return (label[:1].upper() + label[1:], unit)
    return (name, "")


@styled
def histogram_figure(rows: Sequence[dict[str, Any]], *, limits: Limits | None = None):
    """A matplotlib Figure: one histogram per summarised figure, limits as dashed lines.

    Error rows are left out; frequencies spanning more than a decade get a log axis.
    """
    good = [r for r in rows if r.get("status") != "error"]
    extra = sorted({k for r in good for k in r if k.startswith(PARAM_PREFIX)})
    names = [n for n in (*FIGURES, *extra)
             if any(r.get(n) is not None and math.isfinite(r[n]) for r in good)]
    ncol = 3
    nrow = max(1, math.ceil(len(names) / ncol))
    fig = new_figure(4.0 * ncol, 2.9 * nrow)
    axes = fig.subplots(nrow, ncol, squeeze=False)
    for ax, name in zip(axes.flat, names, strict=False):
        v = np.array([r[name] for r in good if r.get(name) is not None and math.isfinite(r[name])])
        label, unit = column_label(name)
        bins = int(np.clip(2 * np.sqrt(v.size), 5, 60))
        logx = bool(name.endswith("_hz") and np.all(v > 0) and v.max() / v.min() > 10)
        edges = np.geomspace(v.min(), v.max(), bins + 1) if logx else bins
        ax.set_axisbelow(True)
        ax.hist(v, bins=edges, color=MEASURED, alpha=0.75, histtype="stepfilled")
        if logx:
            log_axis(ax, "x")
        elif unit in ("Hz", "s"):          # prefixes on the ticks (19.6k), never an offset
            ax.xaxis.set_major_formatter(ENG_FORMATTER)
        else:
            ax.ticklabel_format(axis="x", useOffset=False, style="plain")
        for x in _limit_values(name, limits):
            ax.axvline(x, color=TARGET, linestyle="--", linewidth=1.5)
        ax.set_title(f"{label} (n = {v.size})", fontsize=9.5)
        ax.set_xlabel(f"{label} ({unit})" if unit else f"{label} (ratio)")
        ax.set_ylabel("Units (count)")
    for ax in list(axes.flat)[len(names):]:
        ax.set_visible(False)
    return fig


def plot_histograms(rows: Sequence[dict[str, Any]], path: str | os.PathLike, *,
                    limits: Limits | None = None) -> Path:
    """Write :func:`histogram_figure` as a PNG, atomically; returns the path."""
    fig = histogram_figure(rows, limits=limits)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return write_bytes_atomic(path, buf.getvalue())
