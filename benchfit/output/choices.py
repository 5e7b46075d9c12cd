"""Names of the output layer's choices, importable without numpy (the CLI offers them as choices)."""

from __future__ import annotations

#: curves :func:`benchfit.output.predicted.design_curve` predicts
CURVE_NAMES = ("loop", "closed", "step", "zout", "load_step")
#: which parts of a design a prediction uses
WHICH = ("snapped", "ideal")
#: the models :func:`benchfit.output.spice.model_from_file` takes out of a design file
DESIGN_PARTS = ("plant", "compensator", "compensator-ideal", "loop", "loop-ideal")
