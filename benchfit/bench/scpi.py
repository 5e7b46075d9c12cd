"""SCPI message parsing shared by the simulator: headers with long/short forms.

SCPI-1999 Vol. 1 §6.2 (from memory): a mnemonic may be sent in its long form
(``FREQuency``) or its short form (the capital letters, ``FREQ``), in any
case; nodes in square brackets (``[SENSe]``) are optional; a header ending
in ``?`` is a query.  This module only matches and splits; it keeps no state.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Message:
    """One program message unit: ``header [params]``."""

    header: str          # as sent, without the leading ':' and trailing '?'
    query: bool
    params: tuple[str, ...]
    text: str            # the whole unit as sent, for error messages


def short_form(mnemonic: str) -> str:
    """'FREQuency' -> 'FREQ' (the capital letters and digits of the long form)."""
    return "".join(c for c in mnemonic if c.isupper() or c.isdigit())


def keyword_matches(word: str, mnemonic: str) -> bool:
    """True when ``word`` is the long or the short form of ``mnemonic``, any case."""
    w = word.upper()
    return w == mnemonic.upper() or w == short_form(mnemonic).upper()


def _pattern_nodes(pattern: str) -> list[tuple[str, bool]]:
    nodes = []
    # 'ERRor[:NEXT]' -> 'ERRor:[NEXT]' so every node is split on ':' alone
    for part in pattern.replace("[:", ":[").split(":"):
        if not part:
            continue
        optional = part.startswith("[") and part.endswith("]")
        nodes.append((part.strip("[]"), optional))
    return nodes


def header_matches(header: str, pattern: str) -> bool:
    """Does ``header`` ('SENS:FREQ:STAR') match ``pattern`` ('[SENSe]:FREQuency:STARt')?

    Common commands (``*IDN``) match exactly, case-insensitive.
    """
    if pattern.startswith("*") or header.startswith("*"):
        return header.upper() == pattern.upper()
    words = [w for w in header.split(":") if w]
    nodes = _pattern_nodes(pattern)

    def match(i: int, j: int) -> bool:
        if j == len(nodes):
            return i == len(words)
        name, optional = nodes[j]
        if i < len(words) and keyword_matches(words[i], name) and match(i + 1, j + 1):
            return True
        return optional and match(i, j + 1)

    return match(0, 0)


def split_units(text: str) -> list[str]:
    """Split a program message into units at ';' outside quotes."""
    units, buf, quote = [], [], None
    for c in text:
        if quote:
            buf.append(c)
            if c == quote:
                quote = None
        elif c in "\"'":
            quote = c
            buf.append(c)
        elif c == ";":
            units.append("".join(buf))
            buf = []
        else:
            buf.append(c)
    units.append("".join(buf))
    return [u.strip() for u in units if u.strip()]


def parse_unit(unit: str) -> Message:
    """'SENS:FREQ:STAR 10' -> Message(header='SENS:FREQ:STAR', query=False, params=('10',))."""
    head, _, rest = unit.strip().partition(" ")
    head = head.lstrip(":")
    query = head.endswith("?")
    if query:
        head = head[:-1]
    params = tuple(p.strip() for p in rest.split(",")) if rest.strip() else ()
    return Message(header=head, query=query, params=params, text=unit.strip())
