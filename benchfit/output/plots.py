"""Plot functions: each takes result objects and returns a matplotlib Figure.

Nothing here computes a result a notebook user would need; the numbers come
from the fitting and loop layers, the plots only draw them.  Every
log-frequency axis uses engineering prefixes (1k, 10k, 1M) and every axis
names its unit.  This module gathers the functions of the plot modules:

=====================  ====================================================
bode_fit               measured vs model, residual panel, poles/zeros marked
crossing_view          plant gain against 1/beta, crossing and rate of closure
loop_gain              |T| and ∠T with phase and gain margin drawn, crossings
nyquist                T near −1 with the modulus-margin circle
spread_histograms      Monte Carlo phase margin / crossover / gain margin
step_response          predicted step and load step, measured trace overlaid
output_impedance       |Z| open and closed loop
=====================  ====================================================
"""

from benchfit.output.plot_fit import bode_fit, mark_roots
from benchfit.output.plot_loop import crossing_view, loop_gain, nyquist
from benchfit.output.plot_predict import output_impedance, spread_histograms, step_response

__all__ = ["bode_fit", "mark_roots", "crossing_view", "loop_gain", "nyquist", "spread_histograms",
           "step_response", "output_impedance"]
