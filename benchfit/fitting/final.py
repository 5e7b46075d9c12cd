"""The last stage before the result: the chosen model refined on every point, and its notes.

:func:`final` refines the winner of :func:`benchfit.fitting.hypotheses.race`
on every point, checks once more for cancelling groups the thinned copy
could not see, and settles a negative or insignificant delay; the notes
every final model gets (fewer poles would do with ``--order N``, loosely
located groups above the band) are written here too.
"""

from __future__ import annotations

import numpy as np

from benchfit.fitting.assemble import LOOSE
from benchfit.fitting.groups import cancelling, groups_above, unidentified
from benchfit.fitting.parameters import Structure
from benchfit.fitting.problem import Problem
from benchfit.fitting.pruning import cancel_note, prune_cancelling
from benchfit.fitting.refine import Refined, renumbered
from benchfit.fitting.selection import bic, drop_allowed, prunable


def final(pb: Problem, st: Structure, ref: Refined, notes: list[str], refined: bool = False
          ) -> tuple[Structure, Refined, list[str]]:
    """Refine the chosen structure on every point; drop a delay that is not significant.

    On every point a pair the thinned copy could not see (a spike between its
    points) may appear and cancel with a zero pair: the cancelling check runs
    again here.  ``ref`` may come from the thinned copy or from every point:
    the refinement (:func:`benchfit.fitting.refine.refine`) starts from its
    values either way (from an optimum on every point it takes a few
    evaluations).  ``refined``: ``ref`` is the refinement on every point
    already.  With ``--order N`` a note says when the data may accept
    fewer poles (:func:`fewer_poles_note`).
    """
    refit = pb.refiner()
    f = pb.f
    n_res = 2 * f.shape[0]
    if not refined:
        ref = refit(st, ref.values)
    if prunable(pb)["cancelling"]:
        st, ref, n_cancel = prune_cancelling(st, ref, refit, n_res, f, pb.sigma)
        if n_cancel:
            notes = [*notes, cancel_note(n_cancel)]
            ref = refit(st, ref.values)
    if st.delay and "delay_s" not in pb.fixed:
        i = st.names.index("delay_s")
        if ref.values[i] < 0:
            # A negative delay is no transport delay, and dropping it as it stands
            # changes the response (on a measured ring-slot file the fit went from 8x to
            # 80x the floor, held at zero to 17 000x): of the two refinements, with the
            # delay held at or above zero and without it, the lower BIC goes on.
            keep = [j for j in range(len(st.names)) if j != i]
            st0 = Structure(st.real_poles, st.pole_pairs, st.real_zeros, st.zero_pairs,
                            st.integrators, False)
            held, gone = pb.refiner(causal=True)(st, ref.values), refit(st0, ref.values[keep])
            if bic(gone, n_res) <= bic(held, n_res):
                return _checked_final(pb, st0, gone, [*notes, "a negative delay was fitted; "
                                                      "refined without delay"])
            ref = held
        tv, te = ref.values[i], ref.stderr[i]
        # A delay the user bounds is one they ask for: it stays (and its bound would name a
        # parameter the model without it lacks).
        if "delay_s" not in pb.bounds and (tv <= 0 or (np.isfinite(te) and tv < 2.0 * te)):
            # At zero (its bound) or under 2σ: refine without the delay, and keep that
            # only when the drop test passes: a parameter strongly correlated with the
            # delay can blow up its σ while the data still need it.
            keep = [j for j in range(len(st.names)) if j != i]
            st2 = Structure(st.real_poles, st.pole_pairs, st.real_zeros, st.zero_pairs,
                            st.integrators, False)
            ref2 = refit(st2, ref.values[keep])
            if drop_allowed(ref, ref2, 1, n_res):
                st, ref = st2, ref2
                notes = [*notes, "delay estimate not significant; fitted without delay"]
    return _checked_final(pb, st, ref, notes)


def _checked_final(pb: Problem, st: Structure, ref: Refined, notes: list[str]
                   ) -> tuple[Structure, Refined, list[str]]:
    """The notes every final model gets: fewer poles would do (``--order N``), loosely
    located groups above the band."""
    # the notes name parameters as the result will: numbered from the lowest frequency up
    named, _ = renumbered(st, ref)
    vague: set[str] = set()
    if pb.order != "auto":
        note = fewer_poles_note(pb, st, named)
        if note:
            notes = [*notes, note]
            vague = set(unidentified(st, named))  # named by that note; no drop test ran on them
    return st, ref, [*notes, *loose_notes(st, named, pb.f[-1], skip=vague,
                                          order_given=pb.order != "auto")]


def loose_notes(st: Structure, ref: Refined, f_max: float, skip=(), order_given: bool = False
                ) -> list[str]:
    """Notes for the pole and zero groups above the band that the data locate only loosely
    (σ above :data:`~benchfit.fitting.assemble.LOOSE` of the frequency) but that survived pruning: the data
    need them, so they stay with their large σ; ``--fix`` or ``--bound`` can pin them.
    Groups in ``skip`` (named by :func:`fewer_poles_note`) get no such note; a pole group
    kept by ``--order N`` (``order_given``) is said to be kept as asked, since no drop test
    ran on it.  ``ref`` is numbered as the result will be (lowest frequency first)."""
    out = []
    for g, fr in groups_above(st, ref.values, f_max):
        if g in skip:
            continue
        key = f"{g}_f0_hz" if g.startswith(("pair", "zero_pair")) else f"{g}_hz"
        i = st.names.index(key)
        sd = ref.stderr[i]
        if np.isfinite(sd) and sd > LOOSE * fr:
            why = ("it is kept as --order asks" if order_given and g.startswith(("pole", "pair"))
                   else "dropping it costs more than the noise; it stays")
            out.append(f"{key} = {ref.values[i]:.4g} Hz lies above the band and the data locate "
                       f"it only loosely (σ {100 * sd / fr:.0f} %), but {why} (--fix or --bound "
                       "can pin it)")
    return out


def fewer_poles_note(pb: Problem, st: Structure, ref: Refined) -> str | None:
    """With ``--order N``: a note when pole groups above the band look removable (the model
    is kept with N poles, as asked).

    Evidence weighed: the final refinement's own standard errors, no further
    fit: a pole or pole pair above the band whose frequency (or Q) the data
    cannot locate, σ above the value or not determined at all
    (:func:`benchfit.fitting.groups.unidentified`).  Such a group is one
    ``--order auto`` would try to drop (its drop test decides there); the
    note is a hint, priced at nothing, not a verdict.
    """
    if pb.held("pole", "pair"):
        return None
    vague = set(unidentified(st, ref))
    above = [g for g, _ in groups_above(st, ref.values, pb.f[-1], zeros=False) if g in vague]
    fewer = sum(2 if g.startswith("pair") else 1 for g in above)
    # a pole group that a zero group cancels (groups.cancelling) adds nothing either
    cancel = [pair for pair in cancelling(st, ref.values) if pair[0] not in above]
    n_cancel = sum(2 if p.startswith("pair") else 1 for p, _ in cancel)
    if fewer + n_cancel <= 0:
        return None
    why = []
    if fewer:
        why.append("pole(s) above the band that they cannot locate (σ above the value)")
    if n_cancel:
        why.append("pole(s) that a zero cancels (" + ", ".join(f"{p}~{z}" for p, z in cancel) + ")")
    return (f"the data may accept {fewer + n_cancel} pole(s) fewer: {' and '.join(why)}; kept at "
            f"--order {pb.order} as asked (--order auto tests the drop)")
