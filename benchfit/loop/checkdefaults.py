"""What a check of a design's parts inherits from the design it checks.

``benchfit check`` re-predicts a design with its (possibly changed) parts.
Its Monte Carlo must draw the parts the way the design did, or its yield
disagrees with the design's for no reason a reader can see.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from benchfit.errors import InputError
from benchfit.loop import eseries
from benchfit.loop.designresult import Design
from benchfit.numfmt import sig

#: Tolerances used when neither the user nor the design file says any (R 1 %, C 10 %).
FALLBACK_TOLERANCES = (0.01, 0.10)


@dataclass(frozen=True)
class CheckTolerances:
    """Part tolerances (fractions) of a check, and where they came from."""

    r_tol: float
    c_tol: float
    source: str
    seed: int | None

    def text(self) -> str:
        """'tolerances R ±1 %, C ±5 % (the design's own Monte Carlo), seed 2024'."""
        seed = f", seed {self.seed}" if self.seed is not None else ", no seed"
        return f"tolerances R ±{sig(self.r_tol * 100)} %, C ±{sig(self.c_tol * 100)} % ({self.source}){seed}"

    def to_dict(self) -> dict[str, Any]:
        return {"r_tol": self.r_tol, "c_tol": self.c_tol, "source": self.source, "seed": self.seed}


def check_tolerances(design: Design, given: tuple[float, float] | None = None,
                     seed: int | None = None) -> CheckTolerances:
    """The tolerances and seed a check of ``design`` draws its parts with.

    Evidence weighed, in order:

    1. tolerances given by the user (``--tolerance``);
    2. the design's own Monte Carlo (``spread.r_tol``/``c_tol``);
    3. the tolerances the design was asked for (``provenance.settings.tolerances``);
    4. the tolerance each of the design's part series is made for (E24 → 5 %);
    5. :data:`FALLBACK_TOLERANCES`, saying the design file records none.

    The seed is the one given, else the design's Monte Carlo seed (so the same
    parts give the same draws and the same yield).
    """
    spread = design.spread
    if seed is None and spread is not None:
        seed = spread.seed
    series = f"series R {design.series.get('resistor')}, C {design.series.get('capacitor')}"
    if given is not None:
        return CheckTolerances(float(given[0]), float(given[1]), "given with --tolerance", seed)
    if spread is not None:
        return CheckTolerances(spread.r_tol, spread.c_tol, f"the design's own Monte Carlo, {series}", seed)
    asked = design.provenance.settings.get("tolerances")
    if isinstance(asked, (list, tuple)) and len(asked) == 2 and all(a is not None for a in asked):
        return CheckTolerances(float(asked[0]), float(asked[1]), "the tolerances the design was made with",
                               seed)
    try:
        return CheckTolerances(eseries.tolerance(design.series.get("resistor")),
                               eseries.tolerance(design.series.get("capacitor")),
                               f"the tolerances of the design's {series}", seed)
    except (InputError, KeyError, ValueError, TypeError):   # 'given' parts, or no series recorded
        pass
    r, c = FALLBACK_TOLERANCES
    return CheckTolerances(r, c, "default: the design file records no tolerances or series", seed)
