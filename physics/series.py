"""Series resistance: the I–V curve a measurement sees at the applied bias.

A diode with an area-specific series resistance ``R_s`` (contacts, access regions)
drops ``J·R_s`` outside its active region, so the applied bias is

    V = V_int + J(V_int) · R_s                                       (1)

with ``J(V_int)`` the intrinsic (Tsu–Esaki) current density. Where ``J`` falls steeply
enough (negative differential conductance below ``-1/R_s``), ``V(V_int)`` folds back and
the diode is bistable over a range of applied bias; a sweep then jumps from one branch
to the other (Goldman, Tsui & Cunningham, Phys. Rev. Lett. 58, 1256, 1987, discuss this
extrinsic bistability). :func:`applied_curve` reports what an *upward* sweep records:
each polarity is followed from zero bias outward, and the folded part of (1), which the
sweep jumps over, is left out.

Units: V, A cm^-2, Ohm cm^2 (so ``J·R_s`` is in V).
"""

from __future__ import annotations

import numpy as np


def applied_curve(intrinsic_bias_V, current_A_cm2, resistance_ohm_cm2: float, applied_bias_V):
    """Current density on an applied-bias grid from the intrinsic curve and ``R_s``.

    Parameters
    ----------
    intrinsic_bias_V : array_like, shape (nV,)
        Biases across the active region at which ``current_A_cm2`` was computed; must
        include 0 and reach, on each polarity, at least as far as ``applied_bias_V``.
    current_A_cm2 : array_like, shape (B, nV)
        Intrinsic current density (sign follows the bias).
    resistance_ohm_cm2 : float
        Area-specific series resistance (>= 0).
    applied_bias_V : array_like, shape (nA,)
        Applied biases to report.

    Returns
    -------
    current : ndarray, shape (B, nA)
        The current an upward sweep records at each applied bias (linear interpolation
        along the unfolded branch of eq. (1)); NaN beyond the applied range the
        intrinsic curve reaches.
    bistable : ndarray of bool, shape (B,)
        Whether eq. (1) folds somewhere (the sweep jumps there).
    """
    v_int = np.asarray(intrinsic_bias_V, dtype=float)
    current = np.atleast_2d(np.asarray(current_A_cm2, dtype=float))
    applied = np.asarray(applied_bias_V, dtype=float)
    v_app = v_int[None, :] + current * float(resistance_ohm_cm2)
    result = np.full((current.shape[0], applied.size), np.nan)
    bistable = np.zeros(current.shape[0], dtype=bool)
    for sign in (1.0, -1.0):
        side = np.flatnonzero(sign * v_int >= 0.0)
        side = side[np.argsort(np.abs(v_int[side]), kind="stable")]
        targets = np.flatnonzero(sign * applied >= 0.0)
        if side.size < 2 or targets.size == 0:
            continue
        for b in range(current.shape[0]):
            reach = sign * v_app[b, side]
            # An upward sweep only ever moves to a larger |V|: points behind the running
            # maximum lie on the folded branch it jumps over.
            ahead = reach >= np.maximum.accumulate(reach)
            bistable[b] |= not np.all(ahead)
            x, y = reach[ahead], current[b, side][ahead]
            keep = np.concatenate([[True], np.diff(x) > 0])  # strictly increasing for interp
            result[b, targets] = np.interp(sign * applied[targets], x[keep], y[keep], left=np.nan, right=np.nan)
    return result, bistable
