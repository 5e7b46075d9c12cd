"""Instrument profiles: the SCPI commands one instrument needs, in a TOML file.

Where instruments differ, the difference lives here and never in code.  A
profile has four parts::

    name = "generic-analyzer"
    kind = "analyzer"                  # or "scope"
    description = "..."

    [connection]                       # termination, timeout, retries
    [data]                             # encoding, byte order, response form
    [commands]                         # SCPI text; {placeholders} filled in

Profiles are found, first match wins, in: a path given directly, the folders
in ``$BENCHFIT_PROFILES`` (``os.pathsep``-separated), the user folder
``$XDG_CONFIG_HOME/benchfit/profiles`` (``~/.config/...``), and the profiles
shipped in ``benchfit/bench/profiles``.
"""

from __future__ import annotations

import os
import string
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from benchfit.bench.blocks import BYTE_ORDERS, ENCODINGS
from benchfit.data.quote import cut, quote
from benchfit.errors import InputError

KINDS = ("analyzer", "scope")
RESPONSE_FORMS = ("re_im", "db_deg", "lin_deg")
SHIPPED_DIR = Path(__file__).with_name("profiles")

_TOP = {"name", "kind", "description", "connection", "data", "commands"}
_CONNECTION = {"write_termination": str, "read_termination": str, "timeout_s": float,
               "complete_timeout_s": float, "retries": int, "reset_on_start": bool}
_DATA = {"encoding": str, "byte_order": str, "response_form": str}

_COMMON = {"identify": (), "clear_status": (), "reset": (), "error_query": (),
           "operation_complete": ()}
_COMMON.update({f"format_{e}": () for e in ENCODINGS})
_COMMON.update({f"byte_order_{b}": () for b in BYTE_ORDERS})

#: command key -> placeholders it may use, per kind.
COMMANDS: dict[str, dict[str, tuple[str, ...]]] = {
    "analyzer": {**_COMMON,
                 "spacing_log": (), "spacing_lin": (),
                 "start": ("start_hz",), "stop": ("stop_hz",), "points": ("points",),
                 "level": ("level_v",), "bandwidth": ("bandwidth_hz",),
                 "sweep_mode": (), "step_mode": (), "cw": ("freq_hz",), "cw_query": (),
                 "trigger": (), "axis_query": (), "data_query": (),
                 "start_query": (), "stop_query": (), "points_query": ()},
    "scope": {**{k: ("channel",) for k in _COMMON},
              "select": ("channel",), "arm": ("channel",), "trigger": ("channel",),
              "sample_interval": ("channel",), "first_sample_time": ("channel",),
              "volts_per_code": ("channel",), "volts_at_code_zero": ("channel",),
              "data_query": ("channel",)},
}
REQUIRED: dict[str, tuple[str, ...]] = {
    "analyzer": ("identify", "error_query", "operation_complete", "start", "stop", "points",
                 "trigger", "data_query"),
    "scope": ("identify", "error_query", "operation_complete", "arm", "sample_interval",
              "data_query"),
}


def _fmt_value(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.12g}"
    return str(v)


@dataclass(frozen=True)
class Profile:
    """A validated instrument profile.

    Parameters
    ----------
    name, kind, description
        Identity; ``kind`` is ``"analyzer"`` or ``"scope"``.
    commands
        Command key -> SCPI text (may hold ``{placeholders}``).
    write_termination, read_termination
        Message terminators.
    timeout_s
        I/O timeout per read in s.
    complete_timeout_s
        Timeout of the operation-complete query (``*OPC?``), which waits for a
        whole sweep or record; None uses ``timeout_s``.
    retries
        How often a timed-out or malformed query is retried after resynchronising.
    reset_on_start
        Send the ``reset`` command before configuring.
    encoding, byte_order
        Data encoding (:data:`benchfit.bench.blocks.ENCODINGS`) and byte order of blocks.
    response_form
        How the analyzer's data query lays out each point: ``re_im``, ``db_deg``
        (magnitude dB, phase deg) or ``lin_deg`` (linear magnitude, phase deg).
    source
        Path the profile was read from.
    """

    name: str
    kind: str
    commands: dict[str, str]
    description: str = ""
    write_termination: str = "\n"
    read_termination: str = "\n"
    timeout_s: float = 10.0
    complete_timeout_s: float | None = None
    retries: int = 2
    reset_on_start: bool = False
    encoding: str = "ascii"
    byte_order: str = "big"
    response_form: str = "re_im"
    source: str = ""

    def has(self, key: str) -> bool:
        return bool(self.commands.get(key))

    def require(self, key: str, needed_for: str) -> None:
        """Raise :class:`InputError` unless the profile has command ``key``."""
        if not self.has(key):
            raise InputError(f"profile {quote(self.name)} has no [commands] {key} (needed for {needed_for})",
                             source=self.source)

    def command(self, key: str, *, needed_for: str | None = None, **values: Any) -> str:
        """The SCPI text of ``key`` with placeholders filled.

        Raises
        ------
        InputError
            When the profile lacks the command (naming what needs it).
        """
        text = self.commands.get(key)
        if not text:
            why = f" (needed for {needed_for})" if needed_for else ""
            raise InputError(f"profile {quote(self.name)} has no [commands] {key}{why}", source=self.source)
        return text.format(**{k: _fmt_value(v) for k, v in values.items()})

    @property
    def is_binary(self) -> bool:
        return self.encoding != "ascii"

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "instrument_profile", "name": self.name, "instrument_kind": self.kind,
                "description": self.description, "commands": dict(self.commands),
                "connection": {"write_termination": self.write_termination,
                               "read_termination": self.read_termination,
                               "timeout_s": self.timeout_s, "retries": self.retries,
                               **({"complete_timeout_s": self.complete_timeout_s}
                                  if self.complete_timeout_s is not None else {}),
                               "reset_on_start": self.reset_on_start},
                "data": {"encoding": self.encoding, "byte_order": self.byte_order,
                         "response_form": self.response_form},
                "source": self.source}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Profile:
        """Inverse of :meth:`to_dict` (validated like a TOML file)."""
        raw = {"name": d.get("name"), "kind": d.get("instrument_kind"),
               "description": d.get("description", ""), "connection": d.get("connection", {}),
               "data": d.get("data", {}), "commands": d.get("commands", {})}
        return parse_profile(raw, source=str(d.get("source", "profile")))


def _check_table(table: Any, allowed: dict[str, type], where: str, source: str) -> dict[str, Any]:
    if not isinstance(table, dict):
        raise InputError(f"[{where}] must be a table", source=source)
    out = {}
    for key, value in table.items():
        if key not in allowed:
            raise InputError(f"unknown key {where}.{cut(key)}; expected one of {sorted(allowed)}", source=source)
        want = allowed[key]
        if want is float and isinstance(value, int) and not isinstance(value, bool):
            if abs(value) > 2**53:  # TOML integers are unbounded; float() would overflow
                raise InputError(f"{where}.{key} = {value}: number too large", source=source)
            value = float(value)
        if not isinstance(value, want) or (want is int and isinstance(value, bool)):
            raise InputError(f"{where}.{key} = {cut(repr(value))}: expected a {want.__name__}", source=source)
        out[key] = value
    return out


def parse_profile(raw: dict[str, Any], *, source: str = "profile") -> Profile:
    """Validate a profile given as a plain dict (parsed TOML).

    Raises
    ------
    InputError
        Naming the key: unknown keys, missing required commands, bad values,
        placeholders a command may not use.
    """
    for key in raw:
        if key not in _TOP:
            raise InputError(f"unknown key {quote(key)}; expected {sorted(_TOP)}", source=source)
    name = raw.get("name")
    if not isinstance(name, str) or not name.strip():
        raise InputError("missing key 'name' (a non-empty string)", source=source)
    kind = raw.get("kind")
    if kind not in KINDS:
        raise InputError(f"kind = {quote(kind)}; expected one of {KINDS}", source=source)
    conn = _check_table(raw.get("connection", {}), _CONNECTION, "connection", source)
    data = _check_table(raw.get("data", {}), _DATA, "data", source)
    cmds = raw.get("commands")
    if cmds is None:
        raise InputError("missing table [commands]", source=source)
    allowed = COMMANDS[kind]
    cmds = _check_table(cmds, {k: str for k in allowed}, "commands", source)
    for key in REQUIRED[kind]:
        if not cmds.get(key):
            raise InputError(f"missing required key commands.{key} for a {kind} profile", source=source)
    for key, text in cmds.items():
        try:
            parts = [(f, spec, conv) for _, f, spec, conv in string.Formatter().parse(text)
                     if f is not None]
        except ValueError as e:
            raise InputError(f"commands.{key} = {text[:60]!r}: {e}", source=source) from None
        for f, spec, conv in parts:
            ok = ", ".join("{" + p + "}" for p in allowed[key]) or "none"
            if f not in allowed[key]:
                raise InputError(f"commands.{key} uses placeholder {{{f[:40]}}}; allowed: {ok}",
                                 source=source)
            if spec or conv:
                # benchfit writes every value itself (12 significant digits); a format spec such
                # as {start_hz:>999999999} would let a profile grow a command without bound
                fmt = (f"!{conv}" if conv else "") + (f":{spec}" if spec else "")
                raise InputError(f"commands.{key}: placeholder {{{f}{fmt[:40]}}} has a format; "
                                 f"write it plain, {{{f}}} (benchfit formats the value)",
                                 source=source)
    encoding = data.get("encoding", "ascii")
    if encoding not in ENCODINGS:
        raise InputError(f"data.encoding = {quote(encoding)}; expected one of {list(ENCODINGS)}", source=source)
    byte_order = data.get("byte_order", "big")
    if byte_order not in BYTE_ORDERS:
        raise InputError(f"data.byte_order = {quote(byte_order)}; expected one of {list(BYTE_ORDERS)}",
                         source=source)
    form = data.get("response_form", "re_im")
    if form not in RESPONSE_FORMS:
        raise InputError(f"data.response_form = {quote(form)}; expected one of {list(RESPONSE_FORMS)}",
                         source=source)
    if kind == "scope" and encoding.startswith("int") and not cmds.get("volts_per_code"):
        raise InputError(f"data.encoding = {quote(encoding)} sends ADC codes: the profile needs "
                         "commands.volts_per_code (and volts_at_code_zero when the zero is offset) "
                         "to turn them into volts", source=source)
    if kind == "analyzer" and encoding.startswith("int"):
        raise InputError(f"data.encoding = {quote(encoding)}: an analyzer profile needs ascii, real32 "
                         "or real64", source=source)
    fmt_key = f"format_{encoding}"
    if fmt_key not in cmds and encoding != "ascii":
        raise InputError(f"missing key commands.{fmt_key} (data.encoding is {quote(encoding)})", source=source)
    timeout = conn.get("timeout_s", 10.0)
    if not 0 < timeout <= 3600:
        raise InputError(f"connection.timeout_s = {timeout}: expected 0 < value <= 3600", source=source)
    complete = conn.get("complete_timeout_s")
    if complete is not None and not 0 < complete <= 86400:
        raise InputError(f"connection.complete_timeout_s = {complete}: expected 0 < value <= 86400",
                         source=source)
    retries = conn.get("retries", 2)
    if not 0 <= retries <= 20:
        raise InputError(f"connection.retries = {retries}: expected 0..20", source=source)
    return Profile(name=name.strip(), kind=kind, commands=dict(cmds),
                   description=str(raw.get("description", "")),
                   write_termination=conn.get("write_termination", "\n"),
                   read_termination=conn.get("read_termination", "\n"),
                   timeout_s=timeout, complete_timeout_s=complete, retries=retries,
                   reset_on_start=conn.get("reset_on_start", False),
                   encoding=encoding, byte_order=byte_order, response_form=form, source=source)


def load_profile_file(path: str | os.PathLike) -> Profile:
    """Read and validate one TOML profile file."""
    p = Path(path)
    try:
        raw = tomllib.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("profile file not found", source=str(path)) from None
    except (OSError, UnicodeDecodeError) as e:
        raise InputError(f"cannot read profile: {e}", source=str(path)) from None
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"not valid TOML ({cut(str(e))})", source=str(path)) from None
    except (ValueError, RecursionError) as e:  # an integer of thousands of digits, deep nesting
        raise InputError(f"cannot read profile: {cut(str(e))}", source=str(path)) from None
    return parse_profile(raw, source=str(path))


def search_dirs() -> list[tuple[str, Path]]:
    """Folders searched for profiles by name, first match wins: (origin, folder)."""
    out: list[tuple[str, Path]] = []
    env = os.environ.get("BENCHFIT_PROFILES")
    if env:
        out += [("env", Path(p)) for p in env.split(os.pathsep) if p]
    cfg = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    out.append(("user", Path(cfg) / "benchfit" / "profiles"))
    out.append(("shipped", SHIPPED_DIR))
    return out


@dataclass(frozen=True)
class ProfileEntry:
    """One profile file found on the search path (not yet validated)."""

    name: str
    path: str
    origin: str
    shadowed: bool = False
    extra: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "path": self.path, "origin": self.origin, "shadowed": self.shadowed}


def list_profiles() -> list[ProfileEntry]:
    """Every ``*.toml`` profile on the search path; later duplicates are marked shadowed."""
    seen: set[str] = set()
    out = []
    for origin, folder in search_dirs():
        if not folder.is_dir():
            continue
        for f in sorted(folder.glob("*.toml")):
            out.append(ProfileEntry(f.stem, str(f), origin, shadowed=f.stem in seen))
            seen.add(f.stem)
    return out


def find_profile(name_or_path: str, *, kind: str | None = None, option: str = "--profile") -> Profile:
    """Resolve a profile by file path or by name on the search path, and validate it.

    Raises
    ------
    InputError
        Unknown name (listing the known ones), invalid file, or wrong kind.
    """
    text = str(name_or_path)
    p = Path(text)
    if text.endswith(".toml") or os.sep in text or p.is_file():
        prof = load_profile_file(p)
    else:
        for entry in list_profiles():
            if entry.name == text and not entry.shadowed:
                prof = load_profile_file(entry.path)
                break
        else:
            names = sorted({e.name for e in list_profiles()})
            raise InputError(f"no profile named {quote(text)}; known: {names}", source=option)
    if kind and prof.kind != kind:
        article = "an" if kind[0] in "aeiou" else "a"
        raise InputError(f"profile {quote(prof.name)} is a {prof.kind} profile; expected {article} {kind} profile",
                         source=option)
    return prof
