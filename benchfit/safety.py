"""The short safety caution every place that leads to a live measurement repeats.

The full text is in README.md ("Safety") and docs/capture.md ("Safety first");
this one line points there from ``benchfit capture --help``, ``benchfit scope
--help``, docs/steps.md and the report's footer.
"""

CAUTION = ("Safety: measuring a live converter (possibly mains-powered) puts the instruments and you at "
           "the circuit's potential. Use an injection transformer or isolated inputs, probes rated for "
           "the voltage and category, and a small injected level; read README.md (Safety) and "
           "docs/capture.md (Safety first) before connecting anything.")
