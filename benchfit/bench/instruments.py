"""Finding instruments: list VISA resources and ask each for its identity."""

from __future__ import annotations

import dataclasses
from typing import Any

from benchfit.bench.profile import find_profile
from benchfit.bench.session import open_session
from benchfit.errors import BenchfitError, InputError


def _manager(backend: str) -> Any:
    import pyvisa

    try:
        return pyvisa.ResourceManager(backend)
    except (ValueError, OSError, pyvisa.errors.LibraryError) as e:
        raise InputError(f"cannot load VISA backend {backend!r}: {e}", source="--backend") from None


def list_resources(backend: str = "@py", query: str = "?*::INSTR", *, rm: Any = None) -> list[str]:
    """Resource names the backend finds (an empty list when it finds none)."""
    import pyvisa

    rm = rm or _manager(backend)
    try:
        return sorted(rm.list_resources(query))
    except pyvisa.errors.VisaIOError:  # "resource not found" means none
        return []


def identify_all(names: list[str], backend: str = "@py", *, timeout_s: float = 2.0,
                 rm: Any = None) -> list[dict[str, str]]:
    """Ask every resource the identify query; a failure is reported per resource, not raised."""
    rm = rm or _manager(backend)
    profile = dataclasses.replace(find_profile("generic-analyzer"), timeout_s=timeout_s, retries=0)
    out = []
    for name in names:
        entry = {"resource": name}
        try:
            with open_session(name, profile, resource_manager=rm) as s:
                entry["idn"] = s.identify()
        except BenchfitError as e:
            entry["error"] = str(e)
        out.append(entry)
    return out
