"""Provenance: what produced a result (source files, settings, version, time).

Every result object carries one, and it round-trips through JSON.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any

from benchfit import __version__
from benchfit.errors import InputError


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")


@dataclass(frozen=True)
class Provenance:
    """Where a result came from.

    Parameters
    ----------
    step
        What produced it, e.g. ``"read_sweep"``, ``"fit"``, ``"design"``.
    sources
        Input files (as given by the user) or upstream results' descriptions.
    settings
        The options used, JSON-compatible.
    parents
        Provenance of the inputs, oldest last, as plain dicts.
    version
        benchfit version that produced it.
    created
        ISO-8601 UTC time stamp.
    """

    step: str
    sources: tuple[str, ...] = ()
    settings: dict[str, Any] = field(default_factory=dict)
    parents: tuple[dict[str, Any], ...] = ()
    version: str = __version__
    created: str = field(default_factory=_now)

    def to_dict(self) -> dict[str, Any]:
        return {
            "step": self.step,
            "sources": list(self.sources),
            "settings": dict(self.settings),
            "parents": [dict(p) for p in self.parents],
            "version": self.version,
            "created": self.created,
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> Provenance:
        if not d:
            return cls(step="unknown")
        try:
            return cls(
                step=str(d.get("step", "unknown")),
                sources=tuple(str(s) for s in d.get("sources", ())),
                settings=dict(d.get("settings", {})),
                parents=tuple(dict(p) for p in d.get("parents", ())),
                version=str(d.get("version", "unknown")),
                created=str(d.get("created", "")),
            )
        except (TypeError, ValueError, AttributeError) as e:  # a damaged file's provenance
            raise InputError(f"provenance is malformed ({type(e).__name__}: {e})") from None

    def derive(self, step: str, settings: dict[str, Any] | None = None,
               sources: tuple[str, ...] | None = None) -> Provenance:
        """A new provenance for a result computed from the one this describes."""
        return Provenance(
            step=step,
            sources=self.sources if sources is None else tuple(sources),
            settings=dict(settings or {}),
            parents=(self.to_dict(),),
        )
