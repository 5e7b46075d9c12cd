"""Names of the loop layer's choices, importable without numpy (the CLI offers them as choices)."""

from __future__ import annotations

#: placement methods of :func:`benchfit.loop.synthesis.synthesize`
METHODS = ("k-factor", "crossing")
