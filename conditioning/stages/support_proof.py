"""Free or held: the eigenvalues the spectrum put near zero, decided by proof.

    K, S = D^-1/2 K D^-1/2, its smallest eigenpairs  =>  SupportDecision (+ the proof, for the digits)

A scaled eigenvalue below n eps lambda_max(S) used to be declared zero, a
worst-case factor that grows with the model and is thousands of times
larger than what the stored matrix resolves: a clamped slender strip or a
long cantilever of beam elements was told it was singular. Three outcomes
instead, each with its argument:

* **proved supported**: a proof that lambda_min(E K E) >= lower, with lower
  above the resolution below, from an LU of E K E - cI without pivoting with
  a rigorous rounding bound (:func:`conditioning.linalg.verified_eigenvalue.verified_smallest_eigenvalue`),
  with lower above RESOLUTION_ROOM * R,
  or, where that bound is too coarse and the factorization small, an
  L D L^T in 192-bit arithmetic with the same argument
  (:func:`conditioning.linalg.verified_ldl.proved_lower_bound`). The shift
  c is put just below the Rayleigh quotient of the spectrum's eigenvector in
  E K E's own coordinates (an upper bound on its lambda_min), and lowered
  when a pivot is not positive. No mode is then free.
* **zero at working precision**: |lambda| <= RESOLUTION_ROOM * R + r, with
  R = u * max row sum |S| and r the eigensolver's error bound (residual norm
  of the computed pair). Storing K in float64 changes each entry by at most
  u |K_ij|, so by Weyl's inequality each eigenvalue of S by at most
  ||u |S| ||_2 <= R; a K that is exactly singular gives a computed
  eigenvalue within R + r of zero (RESOLUTION_ROOM widens R for the
  rounding of the assembly itself). Such an eigenvalue cannot be told from
  zero by any computation on the stored numbers.
* **not decided**: above RESOLUTION_ROOM * R + r (the stored matrix resolves it) but not
  proved, and below the old worst-case level ``ZERO_ROOM * n eps
  lambda_max(S)``: both figures are reported and the advice says what each
  case would mean.

The proof's factorization runs beside the shared one; it is skipped (with
why) when the two would not fit in the memory allowed.
"""

from __future__ import annotations

import logging
import math
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.linalg.floating_point import EPS
from conditioning.linalg.verified_eigenvalue import (VerifiedEigenvalueBound, power_of_two_scaling,
                                                     verified_smallest_eigenvalue)
from conditioning.linalg.verified_ldl import LDL_MAX_FLOPS, flint_available, proved_lower_bound
from conditioning.results import SupportDecision
from conditioning.stages.modes import ZERO_ROOM
from conditioning.stages.spectrum import Eigenpairs

logger = logging.getLogger(__name__)

#: Unit round-off of float64 (u = eps / 2 = 2^-53): storing a real number
#: in float64 changes it by at most u relatively (IEEE 754 round to nearest).
UNIT_ROUNDOFF = EPS / 2
#: Shifts tried, as fractions of the Rayleigh-quotient estimate of
#: lambda_min(E K E), from the sharpest down (the project's choice: 0.9 leaves
#: 10% for the estimate's own error; a pivot that is not positive moves on).
SHIFT_FRACTIONS = (0.9, 0.5, 0.1)

#: The stored K's resolution R bounds only what storing K in float64 moves an
#: eigenvalue; an assembled K also carries the rounding of its element
#: matrices and of their sums, a few units of round-off per entry (common
#: practice). An eigenvalue within RESOLUTION_ROOM * R (+ its error bound) of
#: zero is zero at working precision, and a proof counts as supported only
#: above it (project's choice: free scikit-fem solids and plates measure up to
#: 6 R in LAPACK's eigenvalues, tests/test_support_proof.py; a 3,000-element
#: clamped cantilever's lambda_min is 18 R).
RESOLUTION_ROOM = 10.0

#: A rigid motion b of a part whose stored K leaves |K b|_i <= RIGID_ZERO u (|K| |b|)_i in
#: every row is a null vector of a matrix within that componentwise relative distance of K
#: (Oettli and Prager 1964; from memory): an assembled K of a free part measures 1-3 u on
#: scikit-fem solids and plates (tests/test_support_proof.py), so RIGID_ZERO leaves the same
#: room for the assembly's rounding as RESOLUTION_ROOM (project's choice).
RIGID_ZERO = 10.0
#: A rigid motion some row of K resists by more than RIGID_HELD u of that row's |K| |b| is
#: held by a stiffness the stored K carries (a soft spring, a soft support), not by
#: rounding: its mode is then decided by the proof, not by its eigenvalue's size
#: (project's choice: a 3e-7 N/mm spring under a 30 GPa slab measures 433 u).
RIGID_HELD = 100.0
#: A near-zero eigenvector is taken as a rigid motion of the model's parts when at least
#: this share of it (unit vector of S) lies in their span (project's choice).
RIGID_SHARE = 0.99
#: The 192-bit proof for a resisted rigid motion also tries the shift HELD_SHIFT R
#: (project's choice: 1.5 leaves room for the elimination's own rounding bound).
HELD_SHIFT = 1.5

PROVED = "proved supported"
ZERO = "zero at working precision"
UNDECIDED = "not decided"
MIXED = "mixed"


def storage_resolution(S: sp.csr_array) -> float:
    """R = u * max row sum |S|, enlarged for the sum's own rounding (dimensionless).

    Weyl's inequality: |lambda_i(S + dS) - lambda_i(S)| <= ||dS||_2, and
    |dS| <= u |S| entrywise (each K_ij rounded once; D is the stored K's),
    so ||dS||_2 <= u || |S| ||_2 <= u || |S| ||_inf (|S| symmetric).
    """
    if S.nnz == 0:
        return 0.0
    counts = np.diff(sp.csr_array(S).indptr)
    rows = abs(S) @ np.ones(S.shape[0])
    return float(UNIT_ROUNDOFF * np.max(rows) * (1 + (int(counts.max()) + 2) * UNIT_ROUNDOFF))


def eigenpair_error_bounds(S: sp.csr_array, values: NDArray, vectors: NDArray) -> NDArray[np.float64]:
    """Per pair, an upper bound on the distance from the computed eigenvalue to an eigenvalue of S.

    ||S v - theta v||_2 / ||v||_2 (Parlett 1998, Theorem 4.5.1, from memory),
    the residual computed in float64 and enlarged by the bound on its own
    rounding, gamma_(m+2) (|S| |v| + |theta| |v|) with m the longest row.
    """
    if values.size == 0:
        return np.zeros(0)
    m = int(np.diff(sp.csr_array(S).indptr).max(initial=0)) + 2
    gamma = m * UNIT_ROUNDOFF / (1 - m * UNIT_ROUNDOFF)
    SV = S @ vectors
    R = SV - vectors * values[None, :]
    A = abs(S) @ np.abs(vectors) + np.abs(vectors) * np.abs(values)[None, :]
    norms = np.linalg.norm(vectors, axis=0) * (1 - 2 * UNIT_ROUNDOFF)
    out = (np.linalg.norm(R, axis=0) + gamma * np.linalg.norm(A, axis=0)) / norms
    return out * (1 + 4 * m * UNIT_ROUNDOFF)


def claims_zero(eig: Eigenpairs) -> bool:
    """True when the spectrum put an eigenvalue where the old worst-case rule called it zero."""
    vals = eig.values[eig.first:eig.first + eig.count]
    return bool(vals.size and np.min(np.abs(vals)) <= ZERO_ROOM * eig.zero_level)


def decide_support(K: sp.csr_array, S: sp.csr_array, scale: NDArray[np.float64], eig: Eigenpairs, *,
                   perm: Optional[NDArray[np.intp]], flops: float,
                   not_attempted: str = "", rigid: Optional[NDArray[np.float64]] = None,
                   ) -> tuple[SupportDecision, Optional[VerifiedEigenvalueBound]]:
    """Decide the near-zero eigenvalues of the spectrum: proved supported, zero, or not decided.

    Parameters
    ----------
    K : (n, n) sparse
        The stored stiffness (every row with a positive diagonal: a row
        without stiffness makes K singular and is not decided here).
    S : (n, n) sparse
        D^-1/2 K D^-1/2 (``scale`` = D^-1/2), the matrix of ``eig``.
    eig : Eigenpairs
        The spectrum stage's pairs; those from ``first`` to ``first + count``
        are decided.
    perm : (n,) int or None
        The shared factorization's fill-reducing ordering, reused by the proofs.
    flops : float
        The shared factorization's flop count (sum of squared column counts):
        the cost of the 192-bit elimination in its operations.
    not_attempted : str
        Why no proof may be attempted (memory), or "".
    rigid : (n, m) float, optional
        Rigid motions of the model's connected parts in K's DOFs (each column
        zero outside its part; :func:`conditioning.linalg.rigid_motions.rigid_motions`
        with rotations in radians). A near-zero eigenvector that is such a motion is
        decided by what K does to the motion itself (:func:`rigid_motions_held`):
        annihilated to the entries' rounding, it is zero; resisted by some row, it
        is held by a real stiffness and goes to the proof, however small its
        eigenvalue (a soft spring under a stiff slab).

    Returns
    -------
    (SupportDecision, VerifiedEigenvalueBound or None)
        The decision, and the proof (for the certification of the digits)
        when one succeeded.
    """
    lo, hi = eig.first, eig.first + eig.count
    values = np.asarray(eig.values[lo:hi], dtype=np.float64)
    vectors = np.asarray(eig.vectors[:, lo:hi], dtype=np.float64)
    R = storage_resolution(S)
    r = eigenpair_error_bounds(S, values, vectors)
    resolved = np.abs(values) > RESOLUTION_ROOM * R + r
    rigid_note, held = "", np.zeros(values.size, dtype=bool)
    if rigid is not None and rigid.shape[1] and (~resolved).any():
        held, rigid_note = rigid_motions_held(K, scale, rigid, vectors)
    notes = [f"resolution of the stored K {R:.2e} (u * max row sum of |S|, Weyl's inequality; zero within "
             f"{RESOLUTION_ROOM:g} times it, for the assembly's own rounding); "
             f"eigensolver error bounds up to {float(np.max(r, initial=0.0)):.1e} (residual norms)"]
    if rigid_note:
        notes.append(rigid_note)
    proof: Optional[VerifiedEigenvalueBound] = None
    # A resisted rigid motion earns a proof attempt at Weyl's level whatever its eigenvalue's
    # size or sign; without a proof it is decided by its eigenvalue like every other mode.
    if values.size and ((resolved.any() and float(values[0]) > 0) or bool(held[0])):
        if not_attempted:
            notes.append(f"proof not attempted: {not_attempted}")
        else:
            room = 1.0 if bool(held[0]) and not bool(resolved[0]) else RESOLUTION_ROOM
            proof, why = _prove(K, scale, float(values[0]), vectors[:, 0], perm, flops, room=room)
            notes.append(why)
    e = power_of_two_scaling(sp.csr_array(K))
    if proof is not None:
        # lambda_min(S_D) >= lambda_min(S_E) min (s/e)^2, S_D = diag(s/e) S_E diag(s/e).
        ratio = float(np.min((scale / e) ** 2)) * (1 - 4 * UNIT_ROUNDOFF)
        decision = SupportDecision(PROVED, R, values.tolist(), r.tolist(), proof.lower,
                                   proof.lower * ratio, "; ".join(notes))
        return decision, proof
    if resolved.all():
        outcome = UNDECIDED
    elif not resolved.any():
        outcome = ZERO
    else:
        outcome = MIXED
    return SupportDecision(outcome, R, values.tolist(), r.tolist(), None, None, "; ".join(notes)), None


def rigid_motions_held(K: sp.csr_array, scale: NDArray[np.float64], rigid: NDArray[np.float64],
                       vectors: NDArray[np.float64]) -> tuple[NDArray[np.bool_], str]:
    """(per eigenvector: a rigid motion the stored K resists, a note) for near-zero eigenvectors of S.

    Each rigid motion b (a column of ``rigid``) is applied to K with a
    double-double residual, and its componentwise backward error
    omega = max_i |K b|_i / (|K| |b|)_i, in units of u, is read: at most
    RIGID_ZERO, K is that close entry by entry to a matrix that b leaves at
    rest (Oettli-Prager); above RIGID_HELD, K resists b. An eigenvector v of
    S (S = D^-1/2 K D^-1/2, so the displacement is ``scale * v``) is held when
    at least RIGID_SHARE of it lies in the span of the resisted motions and
    less than 1 - RIGID_SHARE in that of the annihilated ones.
    """
    from conditioning.linalg.doubledouble import dd_residual

    K = sp.csr_array(K, dtype=np.float64)
    absK = abs(K)

    def omega(b):
        hi, _ = dd_residual(K, np.ascontiguousarray(b), None, np.zeros(K.shape[0]))
        den = absK @ np.abs(b)
        rows = den > 0
        return float(np.max(np.abs(hi[rows]) / den[rows], initial=0.0)) / UNIT_ROUNDOFF

    # The motions K resists least first: a rigid motion about another point (a combination of
    # the columns) may be the one K leaves at rest. Right singular vectors of K B with its
    # rows weighted by 1 / (|K| |B| 1) and its columns by their norms give those combinations.
    B = rigid / np.maximum(np.linalg.norm(rigid, axis=0), np.finfo(float).tiny)
    KB = np.column_stack([dd_residual(K, np.ascontiguousarray(B[:, j]), None, np.zeros(K.shape[0]))[0]
                          for j in range(B.shape[1])])
    weight = absK @ np.abs(B).sum(axis=1)
    rows = weight > 0
    _, _, Vt = np.linalg.svd(KB[rows] / weight[rows, None], full_matrices=False)
    combos = B @ Vt.T
    omegas = np.array([omega(combos[:, j]) for j in range(combos.shape[1])])
    rigid = combos
    W = rigid / scale[:, None]                      # the motions in S's coordinates

    def share(cols):
        if not np.any(cols):
            return np.zeros(vectors.shape[1])
        Q, _ = np.linalg.qr(W[:, cols])
        V = vectors / np.linalg.norm(vectors, axis=0)
        return np.sum((Q.T @ V) ** 2, axis=0)

    held = (share(omegas > RIGID_HELD) >= RIGID_SHARE) & (share(omegas <= RIGID_ZERO) < 1 - RIGID_SHARE)
    note = (f"rigid motions of the parts: K leaves {int(np.sum(omegas <= RIGID_ZERO))} of {omegas.size} at "
            f"rest to within {RIGID_ZERO:g} u of each row's |K| |b| (Oettli-Prager) and resists "
            f"{int(np.sum(omegas > RIGID_HELD))} by more than {RIGID_HELD:g} u (largest {np.max(omegas):.3g} u)")
    if held.any():
        note += (f"; {int(held.sum())} near-zero eigenvector(s) are resisted motions: a proof is attempted "
                 "at the stored K's resolution")
    return held, note


def _prove(K, scale, theta: float, v: NDArray, perm, flops: float,
           room: float = RESOLUTION_ROOM) -> tuple[Optional[VerifiedEigenvalueBound], str]:
    """A proof that lambda_min(E K E) exceeds ``room`` times the resolution of E K E, or None with
    why each attempt failed. ``room`` is 1 (Weyl's inequality alone: the unrounded K is positive
    definite too) when the near-zero modes are rigid motions the stored K resists, which rounding
    cannot explain (:func:`rigid_motions_held`); RESOLUTION_ROOM otherwise."""
    K = sp.csr_array(K, dtype=np.float64)
    e = power_of_two_scaling(K)
    if np.any(e == 0):
        return None, "proof not attempted: a diagonal entry is not positive"
    SE = sp.csr_array(sp.diags(e) @ K @ sp.diags(e))
    SE.sum_duplicates()
    if not np.array_equal(SE.indices, SE.T.tocsr().indices) or abs(SE - SE.T).max() != 0:
        return None, "proof not attempted: K is not exactly symmetric"
    R_E = room * storage_resolution(SE)
    # The Rayleigh quotient of the eigenvector in E K E's coordinates: y = (s / e) v gives
    # y' S_E y = v' S v = theta, so RQ = theta / ||y||^2 >= lambda_min(S_E) (up to rounding).
    y = (scale / e) * v
    rq = theta / float(y @ y)
    why = []
    for frac in SHIFT_FRACTIONS:
        c = frac * rq
        if c <= R_E:
            break
        bound = verified_smallest_eigenvalue(K, theta, perm=perm, shift=c)
        if bound.verified and bound.lower > R_E:
            return bound, bound.reason
        why.append(f"float64 bound at c = {c:.2e}: {bound.reason}")
        if bound.rounding_bound is not None:
            break  # the pivots were positive: a lower shift only loosens the same bound
    if flops > LDL_MAX_FLOPS:
        why.append(f"192-bit elimination not attempted: {flops:.1e} operations, more than {LDL_MAX_FLOPS:.0e}")
    elif not flint_available():
        why.append("192-bit elimination not attempted: python-flint is not installed")
    else:
        # Below the eigensolver's own error bound the estimate may be low: a shift just
        # above the level to prove is tried too (HELD_SHIFT times it).
        shifts = sorted({frac * rq for frac in SHIFT_FRACTIONS} | ({HELD_SHIFT * R_E} if room < RESOLUTION_ROOM
                                                                   else set()), reverse=True)
        for c in shifts:
            if c <= R_E:
                break
            lower, how = proved_lower_bound(SE, c, perm)
            if lower is not None and lower > R_E:
                return VerifiedEigenvalueBound(True, lower, c, c - lower, e, how), f"proved: {how}"
            why.append(how)
    return None, "no proof: " + "; ".join(why) if why else "no proof attempted: the estimate is within the resolution"


__all__ = ["PROVED", "ZERO", "UNDECIDED", "MIXED", "decide_support", "claims_zero", "storage_resolution",
           "eigenpair_error_bounds"]
