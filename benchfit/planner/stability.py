"""What the Nyquist verdict of the loop fitted to a capture adds to its margins."""

from __future__ import annotations


def stability_warnings(m) -> list[str]:
    """What the fitted loop's Nyquist verdict adds to its margins, as warnings.

    Evidence weighed: the margins of the model fitted to the capture
    (:class:`benchfit.loop.margins.Margins`): its right-half-plane poles and the
    encirclement count.  A loop that is open-loop unstable, or whose closed loop
    is not stable, has margins that do not mean what they mean for a stable
    loop, and the capture's figures alone would not say so.
    """
    out = []
    if m.open_loop_unstable_poles:
        out.append(f"the loop fitted to this capture has {m.open_loop_unstable_poles} right-half-"
                   "plane pole(s) (open-loop unstable): its margins are read with that count; "
                   "check them with `benchfit margins` on the fit")
    if not m.closed_loop_stable:
        out.append(f"the loop fitted to this capture reads as {m.verdict or 'unstable'} in closed "
                   f"loop (Nyquist count on the fitted model, with {m.open_loop_unstable_poles} "
                   f"open-loop right-half-plane pole(s) and {m.integrators} integrator(s)): its "
                   "margins do not describe a stable loop; if the plant is open-loop unstable, "
                   "check with `benchfit margins --unstable-poles N` on the sweep")
    return out
