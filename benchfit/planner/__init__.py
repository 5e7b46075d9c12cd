"""Adaptive capture: a sweep planner above the instrument, fitting and loop layers.

It measures a coarse pass, fits, places points where the margins are decided,
sets each point's bandwidth and readings from the measured noise, checks that
the level keeps the loop linear, and stops when PM and GM are known to the
asked precision (:mod:`benchfit.planner.adaptive`).
"""
