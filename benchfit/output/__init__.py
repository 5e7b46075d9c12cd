"""Output: plots, HTML report, exports (CSV curves, SPICE).  Reads result objects only."""
