"""What a sweep export says it measured: the quantity declared by a keyed header line.

Instrument exports put their metadata above the table as ``key<sep>value``
lines (``Measurement;control-to-output, buck converter``); the reader keeps
them in ``meta["notes"]``.  :func:`declared_quantity` reads a quantity from
them so that a file that names what it holds is not taken as "unknown".
"""

from __future__ import annotations

import re

#: Keys of a header line that name what was measured (lower case, compared whole).
QUANTITY_KEYS = ("measurement", "measured", "measure", "quantity", "measurement type",
                 "trace type", "response type")

#: Terms of the trade for each quantity, tried in this order (the first that occurs wins:
#: "closed-loop gain" holds "loop gain", so closed comes before loop).
QUANTITY_TERMS: tuple[tuple[str, tuple[str, ...]], ...] = (
    ("closed", ("closed-loop", "closed loop", "reference-to-output", "reference to output")),
    ("impedance", ("impedance", "zout", "z11")),
    ("plant", ("control-to-output", "control to output", "duty-to-output", "duty to output",
               "power stage", "plant")),
    ("compensator", ("compensator", "error amplifier", "error-amplifier")),
    ("loop", ("loop gain", "loop-gain", "return ratio")),
)

_KEYED = re.compile(r"^\s*([A-Za-z][A-Za-z ]{1,30}?)\s*[;:=,\t]\s*(.+)$")


def declared_quantity(notes) -> tuple[str, str] | None:
    """The quantity a keyed header line declares, with that line; None when none does.

    Evidence weighed: only header lines of the form ``KEY<sep>VALUE`` (``;``,
    ``:``, ``=``, ``,`` or tab) whose key is one of :data:`QUANTITY_KEYS`,
    i.e. where the export itself says "this is what was measured"; the value
    must hold one of the trade terms of :data:`QUANTITY_TERMS` (checked in
    that order).  Free text above the table (a title, a description of the
    set-up) is not read: "open-loop gain" of an amplifier is a plant to the
    loop and a loop gain to the word, and a description can name several
    things.  Two keyed lines that declare different quantities declare
    nothing (None).
    """
    found: list[tuple[str, str]] = []
    for line in notes or ():
        m = _KEYED.match(str(line))
        if not m or m.group(1).strip().lower() not in QUANTITY_KEYS:
            continue
        value = m.group(2).lower()
        for quantity, terms in QUANTITY_TERMS:
            if any(t in value for t in terms):
                found.append((quantity, str(line).strip()))
                break
    if not found or len({q for q, _ in found}) > 1:
        return None
    return found[0]
