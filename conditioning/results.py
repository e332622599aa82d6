"""Typed results of every stage, and the report that gathers them.

Each stage returns one frozen dataclass defined here. Fields are documented
where declared, with units; every figure carries how it was obtained
(``method``). Renderers read these objects and never compute.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal, Optional

import numpy as np
from numpy.typing import NDArray

#: Names of the degrees of freedom a node may carry, in canonical order
#: (``DofTable.dof`` and :attr:`ModelGeometry.row_dof` index into it).
DOF_NAMES: tuple[str, ...] = ("ux", "uy", "uz", "rx", "ry", "rz")

#: Version of the report's JSON layout (written by the JSON renderer, checked
#: by the reader of saved reports); bump the number when a key changes meaning
#: or disappears (adding keys keeps the version).
REPORT_SCHEMA = "conditioning-report/2"

Severity = Literal["error", "warning", "note"]
ModeKind = Literal["rigid-body", "mechanism", "dof-without-stiffness"]


# --------------------------------------------------------------- structure
@dataclass(frozen=True)
class Asymmetry:
    """The largest difference between K and its transpose, and where."""

    relative: float
    """max |K_ij - K_ji| / max |K_ij| over stored entries (dimensionless)."""
    row: Optional[int]
    """0-based row of the worst pair (row < col); None when K is symmetric."""
    col: Optional[int]
    """0-based column of the worst pair; None when K is symmetric."""
    pair_relative: float = 0.0
    """|K_ij - K_ji| / max(|K_ij|, |K_ji|) at the worst pair: the difference
    relative to the entry itself (dimensionless; 0.01 for an entry changed by
    1%, 1.0 when one side of the pair is missing)."""
    pair_values: Optional[tuple[float, float]] = None
    """(K[row, col], K[col, row]) at the worst pair, in K's units; None when
    K is symmetric."""
    pairs: int = 0
    """Number of pairs (i < j) that differ beyond round-off (the rule of
    :func:`conditioning.stages.structure.asymmetry_reported`, applied per pair)."""


@dataclass(frozen=True)
class OneTriangleExport:
    """A matrix stored as one triangle plus a few entries of the other
    (recognised and mirrored by :func:`conditioning.io.matrix_formats.mirror_one_triangle_export`)."""

    triangle: Literal["lower", "upper"]
    """The triangle that holds almost all off-diagonal entries."""
    triangle_entries: int
    """Off-diagonal entries stored in that triangle."""
    stray_rows: NDArray[np.intp]
    """0-based row of each stray entry (stored in the other triangle)."""
    stray_cols: NDArray[np.intp]
    """0-based column of each stray entry."""
    stray_paired: NDArray[np.bool_]
    """True where the stray's mirror position was stored as well (the pair was
    given twice and kept as given); False where the stray was the pair's only
    value and was mirrored like the rest of the triangle."""


@dataclass(frozen=True)
class StructureResult:
    """Checks on the matrix that need no factorization."""

    n: int
    """Number of rows (DOFs)."""
    stored_entries: int
    """Stored nonzeros of the full (both triangles) matrix."""
    empty_rows: NDArray[np.intp]
    """Rows with no nonzero entry at all: DOFs without stiffness."""
    zero_diagonal: NDArray[np.intp]
    """Rows with a zero diagonal but other nonzeros (not in ``empty_rows``)."""
    negative_diagonal: NDArray[np.intp]
    """Rows with a negative diagonal entry."""
    asymmetry: Asymmetry
    """Largest relative asymmetry and where."""
    part_of_row: NDArray[np.intp]
    """Connected-component label of each row (graph of K, csgraph). Labels
    ``0 .. parts - 1`` are the counted parts, largest first; rows without
    stiffness and placeholder rows that form parts of their own come after."""
    part_sizes: NDArray[np.intp]
    """Rows per part, indexed by label."""
    parts: int
    """Number of connected parts, counting only parts that hold a row with
    stiffness other than a placeholder row."""
    placeholder_rows: NDArray[np.intp] = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    """0-based rows that take no part in the structure: a positive diagonal
    and no nonzero entry elsewhere in their row or column. Each is an
    equation of its own, u_i = f_i / K_ii: a restrained DOF kept with a
    placeholder diagonal (typically 1), or a DOF held only by a spring to
    ground with nothing else attached; the matrix alone cannot tell the two
    apart (:func:`conditioning.stages.structure.looks_like_placeholder` says which
    look like the first). Not counted in ``parts``; rows without any entry
    are in ``empty_rows`` instead. Empty when K is diagonal (no structure
    for such rows to be left over from)."""
    one_triangle: Optional[OneTriangleExport] = None
    """Set when the input stored one triangle plus a few stray entries of the
    other and was mirrored (see :class:`OneTriangleExport`); None otherwise."""
    constraint_rows: NDArray[np.intp] = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    """0-based rows of a zero diagonal block coupled to the rest: rows with a
    zero diagonal that have no entry in the columns of the other zero-diagonal
    rows, and couple to rows with stiffness. They are the rows of Lagrange
    multipliers or constraint equations, [[K, C^T], [C, 0]]: the matrix is a
    constrained (saddle-point) system, not a stiffness, and has one negative
    eigenvalue per independent constraint (when K is positive definite on the
    motions the constraints allow). Empty otherwise."""


# ----------------------------------------------------------- factorization
@dataclass(frozen=True)
class FactorizationInfo:
    """What the shared factorization did (the object itself lives in
    :mod:`conditioning.engine.scipy_engine`)."""

    ordering: str
    """Fill-reducing ordering used (e.g. ``"nested-dissection"``, ``"MMD_AT_PLUS_A"``)."""
    shift: float
    """sigma in S - sigma*I that was factored (S the scaled matrix); 0 when unshifted."""
    negative_pivots: Optional[int]
    """Negative pivots of the factorization = eigenvalues of S below ``shift``
    (Sylvester's law of inertia); None when the pivots were not read (see
    ``pivots_note``)."""
    fill: int
    """Stored entries of L + U."""
    flops: float
    """Estimated floating-point operations of the factorization
    (sum over columns of (column count of L)^2)."""
    seconds: float
    """Wall time of the factorization (s)."""
    symmetric_pivoting: bool
    """True when the row permutation equals the column permutation, so the
    pivots are those of an LDL^T and the inertia count is valid."""
    pivots_note: str = ""
    """Why the pivots were not read, in words; empty when they were."""


# ------------------------------------------------------------- condition
@dataclass(frozen=True)
class ConditionResult:
    """Condition numbers, each with how it was obtained."""

    singular: bool
    """True when K has a null space at working precision (a near-singular mode
    below the gap, or a DOF without stiffness)."""
    lambda_max: float
    """Largest eigenvalue of K (Lanczos to 1e-3 relative, LAPACK for small
    matrices), in K's units."""
    lambda_min: Optional[float]
    """Eigenvalue of K nearest zero (Lanczos on K^-1, LAPACK for small
    matrices), in K's units; None when singular or without a factorization."""
    estimate: Optional[float]
    """kappa_2(K) = |lambda_max| / |lambda_min|, None when singular or
    without a factorization (``estimate_method`` says which)."""
    estimate_method: str
    """How ``estimate`` was obtained (eigensolver for each end and its
    tolerance), or, when singular, why K is singular, in words."""
    scaled_estimate: Optional[float]
    """kappa_2 of S = D^-1/2 K D^-1/2 (D = diag K), None when singular.
    Without a factorization it comes from LOBPCG; if LOBPCG did not converge
    it is only a lower bound (``scaled_method`` says so)."""
    scaled_lambda_min: Optional[float]
    """Smallest computed |eigenvalue| of S (dimensionless), set also when K is
    singular (then it is the near-zero eigenvalue of a free mode, not to be
    read as a condition figure); None when no eigenvalue of S was computed."""
    scaled_lambda_max: float
    """Largest eigenvalue of S (dimensionless; Lanczos to 1e-3 relative, or
    LAPACK for small matrices): the scale of the gap rule."""
    scaled_method: str
    """How ``scaled_estimate`` was obtained, with the references for why it
    governs the accuracy of a Cholesky-type solve."""
    one_norm_estimate: Optional[float]
    """Hager-Higham estimate of kappa_1(K), a lower bound usually within a
    factor 3; None when singular or without a factorization."""
    one_norm_method: str
    """How ``one_norm_estimate`` was obtained, or why it was not computed."""
    scaling_gain_digits: Optional[float]
    """log10(estimate / scaled_estimate): digits of the raw figure that come
    only from rows of very different size (units, DOF-type mixing, stiff
    material next to soft), which diagonal scaling removes."""


# ------------------------------------------------------------------ modes
@dataclass(frozen=True)
class RowShares:
    """Where one near-singular mode lives, row by row, kept so that a row can be
    explained later from the saved report (:func:`conditioning.stages.explain.row_shares`)."""

    rows: NDArray[np.intp] = field(repr=False)
    """0-based rows whose share is at least ``smallest``, ascending."""
    shares: NDArray[np.float64] = field(repr=False)
    """v_i^2 / ||v||_2^2 at those rows for the scaled mode v = D^1/2 u
    (dimensionless, 0..1; as :attr:`ModeShare.share`)."""
    smallest: float
    """The smallest share kept (dimensionless): a row not in ``rows`` has
    less. The shares sum to 1, so at most 1 / ``smallest`` rows are kept,
    whatever the size of the model."""


@dataclass(frozen=True)
class NearSingularMode:
    """One zero-energy (or nearly zero-energy) motion of K, classified and located."""

    eigenvalue: float
    """Eigenvalue of the scaled matrix S (dimensionless): the Rayleigh
    quotient u'Ku / u'Du of the mode; 0.0 for a DOF without stiffness. Below
    n eps lambda_max(S) it is round-off, not a stiffness."""
    relative_eigenvalue: float
    """eigenvalue / lambda_max(S)."""
    kind: ModeKind
    """``rigid-body`` (a rigid motion of its part), ``mechanism`` (a motion
    that is not rigid), ``dof-without-stiffness`` (a row with no entry,
    or a direction at one node that its own diagonal block gives no
    stiffness and nothing couples: a drilling rotation about an inclined
    shell normal).
    Without coordinates rotations cannot be recognised, so a rotation of a
    part is reported as a mechanism."""
    motion: dict[str, float]
    """Share of each rigid motion (dof name -> share, summing to 1); in-plane
    rotation is ``rz``. For a DOF without stiffness found at one node and a
    mechanism that turns about one axis, the shares of ``axis`` on the rotation
    (or translation) names. Empty for other mechanisms."""
    nodes: list[int]
    """Nodes that locate the mode: the part's nodes that move (rigid body; a
    node that every free motion of the part leaves in place, on the axis it
    turns about, is left out), the nodes
    that carry the mechanism (weight sum of v_i^2 over the node's rows of the
    scaled mode v = D^1/2 u at least 1% of the largest node's) or move (in
    length units, translation or rotation times the part's size, at least 1%
    of the most moving node's, when coordinates are given; the meeting
    nodes are ``meeting``), the node (DOF without stiffness). 1-based rows
    without a DOF map."""
    part: int
    """Connected part the mode lives on, 1-based (StructureResult.part_of_row + 1)."""
    rigid_share: float
    """Fraction of the mode (in the 2-norm squared) explained by rigid motions
    of its part; nan without coordinates."""
    groups: list[list[int]] = field(default_factory=list)
    """For a mechanism: node groups that move rigidly together."""
    vector: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """The mode in K's DOFs (u = D^-1/2 v, unit max-norm); not serialised."""
    exact: bool = True
    """True when the eigenvalue is zero at working precision: within the
    resolution of the stored K (Weyl's inequality, ``SupportDecision.resolution``)
    plus the eigensolver's error bound of zero, and no proof that K is
    positive definite: K is singular. False for a nearly free mode that some
    small stiffness (a soft spring) still holds, or one ``undecided``."""
    undecided: bool = False
    """True when the eigenvalue lies above that resolution (the stored K
    resolves it) but no proof of positive definiteness succeeded and it is
    below 10 n eps lambda_max(S) (the old worst-case zero level,
    ``conditioning.stages.modes.ZERO_ROOM``): not decided whether the mode is
    free (see ``SpectrumResult.support``)."""
    axis: Optional[tuple[float, float, float]] = None
    """Unit direction (global x, y, z; dimensionless) of the motion when it
    has one: the axis a DOF without stiffness turns about (or moves along)
    at its node, the axis a mechanism turns about when it is a rotation
    only (a member spinning about its own axis). None otherwise."""
    meeting: list[int] = field(default_factory=list)
    """For a mechanism: nodes where two of ``groups`` really meet (a node
    next to two groups whose own neighbourhood moves rigidly with neither);
    empty when no two groups meet."""
    description: str = ""
    """The motion in words, e.g. ``"rotation about the axis (0.00, -0.89,
    0.45)"``, ``"spin of a member about its own axis"``, or for a rigid-body
    mode that turns about a point away from the centroid (whose ``motion``
    shares then mix translation and rotation) ``"rotation rz about node 7"``;
    empty when ``kind`` and ``motion`` say it all."""
    row_shares: Optional[RowShares] = None
    """The rows that carry the mode and their shares of it, for ``conditioning
    explain`` from a saved report; None when the mode has no ``vector`` (or
    for a report built without them)."""


@dataclass(frozen=True)
class ModeGroup:
    """Near-singular modes of one kind on one part, reported as one line.

    A model may have hundreds of modes of one kind (drilling rotations
    without stiffness, free nodes of a mass matrix); the renderers print one
    line per group, the JSON keeps every mode in ``SpectrumResult.modes``.
    """

    kind: ModeKind
    """Kind shared by the modes of the group."""
    part: int
    """Connected part, 1-based (as NearSingularMode.part); 0 for the group of
    empty rows when they lie on several parts (each empty row is a part)."""
    count: int
    """Number of modes in the group (at least 1)."""
    exact: bool
    """True when every mode of the group is zero at working precision."""
    motion: str
    """The free motions in words, e.g. ``"rotation about 4 axes: (0.00,
    -0.89, 0.45) x 30, ..."`` or ``"ux, uy, rz"``; empty for mechanisms
    without one description."""
    nodes: list[int]
    """Nodes of the group's modes (the union of their ``nodes``), sorted."""
    modes: list[int]
    """1-based positions of the group's modes in SpectrumResult.modes."""
    eigenvalue_max: float
    """Largest scaled eigenvalue in the group (dimensionless)."""


@dataclass(frozen=True)
class SupportDecision:
    """Whether the smallest scaled eigenvalues the spectrum put near zero are zero
    or a real stiffness, decided by proof where one could be given
    (:mod:`conditioning.stages.support_proof`)."""

    outcome: str
    """``proved supported`` (lambda_min(S) is proved above what storing K in
    float64 can move an eigenvalue: no mode is free), ``zero at working
    precision`` (every eigenvalue concerned is within RESOLUTION_ROOM times that
    resolution plus the eigensolver's error bound of zero: K cannot be told from a singular
    matrix), ``not decided`` (some eigenvalue lies above the resolution but no
    proof of positive definiteness succeeded), or ``mixed`` (some modes zero,
    others not decided)."""
    resolution: float
    """u * max row sum of |S| (dimensionless, S's scale; u = 2^-53): by
    Weyl's inequality no eigenvalue of S moves by more than this when each
    entry of K is rounded to float64 (|dK_ij| <= u |K_ij|)."""
    eigenvalues: list[float] = field(default_factory=list)
    """The scaled eigenvalues decided on, ascending (dimensionless)."""
    error_bounds: list[float] = field(default_factory=list)
    """Per eigenvalue, the eigensolver's error bound: the residual norm
    ||S v - lambda v|| of the computed eigenpair (unit v), enlarged by its own
    rounding; an eigenvalue of S lies within it."""
    lower_bound: Optional[float] = None
    """The proved lower bound on lambda_min of the power-of-two scaled E K E
    (dimensionless); None when nothing was proved."""
    lower_bound_scaled: Optional[float] = None
    """That bound carried to S = D^-1/2 K D^-1/2 (divided by the largest
    ratio of the two scalings' squares): lambda_min(S) >= it; None without a
    proof."""
    method: str = ""
    """How the outcome was reached, in words: the proof that succeeded, or why
    each attempt failed, and the resolution argument."""


@dataclass(frozen=True)
class NegativeMode:
    """One negative eigenvalue of S located by its eigenvector
    (:func:`conditioning.stages.negative_modes.locate_negative_modes`)."""

    eigenvalue: float
    """Eigenvalue of the scaled matrix S (dimensionless, below zero)."""
    nodes: list[int]
    """Nodes that carry the eigenvector, largest share first: those whose
    weight (sum of v_i^2 over the node's rows of the unit scaled vector v)
    is at least 1% of the largest node's, at most 12. 1-based rows without a
    DOF map."""
    shares: list[float]
    """Each of ``nodes``' share of the vector (its weight; the weights of all
    nodes sum to 1)."""
    method: str
    """How the eigenvector was obtained, in words (LAPACK, the spectrum
    stage's shift-and-invert Lanczos, or a Lanczos run for the smallest
    algebraic eigenvalues), with its residual."""


@dataclass(frozen=True)
class SpectrumResult:
    """Smallest eigenvalues of S and the split into near-singular modes: the
    spectrum stage's public result, however its eigenpairs were obtained
    (LAPACK, shift-and-invert Lanczos on the factorization, or LOBPCG without
    one)."""

    smallest: NDArray[np.float64]
    """Smallest computed eigenvalues of S, ascending."""
    count: int
    """Number of near-singular modes (eigenvalues below the gap), including
    DOFs without stiffness."""
    gap: Optional[float]
    """Ratio lambda_{count+1} / lambda_count at the chosen split; None when
    there is no mode."""
    gap_rule: str
    """The rule used to choose the split, in words."""
    inertia_count: Optional[int]
    """Eigenvalues below the split point counted by Sylvester's law (negative
    pivots of S - c*I), None when not computed."""
    inertia_agrees: Optional[bool]
    """True when ``inertia_count`` equals the count the eigen-solve implies
    (``below_split``), False when they disagree (the mode list may then be
    incomplete), None when there was no inertia count (no split, or no
    factorization)."""
    negative_eigenvalues: int
    """Eigenvalues of K below zero beyond round-off (indefinite stiffness);
    at least this many when ``negative_exact`` is False."""
    modes: list[NearSingularMode]
    """The near-singular modes: DOFs without stiffness first, then per part
    its rigid-body modes and mechanisms (``count`` of them)."""
    method: str
    """Eigensolver used for ``smallest``, in words."""
    smallest_vector: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """Unit eigenvector of S for its smallest eigenvalue, in S's coordinates
    (v; the displacement shape is D^-1/2 v), all rows; not serialised."""
    below_split: Optional[int] = None
    """Eigenvalues of S below the split point as the eigen-solve found them
    (true negative ones included, DOFs without stiffness not: they are left
    out of S): the figure ``inertia_count`` is compared with. None without a
    split."""
    stiff_link_eigenvalues: list[float] = field(default_factory=list)
    """Scaled eigenvalues below the split that stiff links explain (see the
    stiffness jumps); they are not near-singular modes and not in ``modes``."""
    mode_groups: list[ModeGroup] = field(default_factory=list)
    """``modes`` grouped by kind, part and exactness, in the order of their
    first mode: one line each in the terminal and HTML reports."""
    support: Optional[SupportDecision] = None
    """Whether the modes put near zero are free or held by a small stiffness,
    decided by proof (None when the spectrum put no eigenvalue near zero)."""
    negative_method: str = ""
    """How ``negative_eigenvalues`` was obtained, in words (all eigenvalues,
    the factorization's inertia, the eigenvalues found, a Lanczos search of
    the low end of the spectrum)."""
    negative_exact: bool = True
    """True when ``negative_eigenvalues`` is a count (LAPACK, or Sylvester's
    law on the factorization's pivots); False when it is a lower bound (only
    the eigenvalues found, or proved, are counted)."""
    negative_modes: list[NegativeMode] = field(default_factory=list)
    """The most negative eigenvalues (at most 4) located by their
    eigenvectors, most negative first; empty when K has none, or when no
    eigenvector was obtained (``negative_method`` then says why)."""


@dataclass(frozen=True)
class Restraint:
    """One support of a minimal set that removes the near-singular modes
    (:func:`conditioning.stages.restraints.suggest_restraints`)."""

    node: int
    """Node id as the user numbered it; the 1-based row without a DOF map."""
    dof: str
    """DOF name (``"ux"`` ... ``"rz"``); ``"-"`` without a DOF map."""
    row: int
    """0-based matrix row."""
    reason: str
    """What the restraint stops, in plain words (a translation, a rotation
    about a point with its lever arm in model length units, a mechanism, a
    DOF without stiffness). The set as a whole is what removes the modes;
    one reason alone is advice, not a proof."""


@dataclass(frozen=True)
class StiffnessJump:
    """A stiffness far above the typical stiffness of its DOF type
    (:func:`conditioning.stages.jumps.find_stiffness_jumps`)."""

    kind: Literal["coupling", "diagonal-outlier", "stiff-region"]
    """``coupling``: an off-diagonal K_ij between DOFs of one type (a penalty
    or very stiff link); ``diagonal-outlier``: a large K_ii with no equally
    stiff link in a grounded row (a support or spring to ground given by a
    large number); ``stiff-region``: large K_ii in rows that are not grounded
    (K times a rigid motion is round-off there): a region much stiffer than
    its surroundings, or a distorted element, ``nodes`` all its nodes."""
    rows: list[int]
    """0-based rows involved."""
    nodes: list[int]
    """The two linked nodes (coupling) or the node (outlier); 1-based rows
    without a DOF map."""
    ratio: float
    """Stiffness ratio (stiff / typical of the same dof type), dimensionless."""
    digits_cost: float
    """About log10(ratio) for a coupling: digits of the solution it can cost;
    0 for a diagonal outlier, which diagonal scaling removes (it raises only
    the raw condition number; a direct solve does not pay it)."""
    advice_value: Optional[float]
    """A suggested stiffness for the link that stays effective with fewer
    digits lost, in K's units; None when the stiffness is already within the
    usual penalty range, and for a diagonal outlier (a smaller spring to
    ground would cost no fewer digits, only make the support softer)."""
    reasoning: str
    """Why it costs digits and what to do, in plain words (with the part
    when the model has several)."""
    structural_stiffness: Optional[float] = None
    """For a coupling: the largest stiffness of the linked rows outside the
    link (same unit class, translations or rotations), the structure's own
    share of those rows, in K's units; None for a diagonal outlier."""
    structure_digits_kept: Optional[float] = None
    """For a coupling: decimal digits of that structural stiffness still held
    next to the penalty in the diagonal, max(0, log10(k / ulp(K_ii))) over the
    linked rows (about 15.65 - log10(K_ii / k)); 0 when swallowed."""
    swallowed: bool = False
    """True when the penalty has swallowed the structure: the structural
    stiffness of every linked row is below 10 n eps |K_ii| (K is singular at
    working precision along the link; below half an ulp nothing of it is left,
    ``structure_digits_kept == 0``). ``digits_cost`` is then all the digits of
    float64, log10(2^53) = 15.95, for the linked DOFs."""


@dataclass(frozen=True)
class PivotEntry:
    """Digits lost at one pivot of the shared factorization."""

    row: int
    """0-based matrix row."""
    label: str
    """The row in words, ``"node 12 uy"`` or ``"row 37"``."""
    kept: float
    """D_ii / K_ii: the share of the DOF's diagonal stiffness left at its pivot
    once the DOFs eliminated before it are condensed out (dimensionless; 1 for
    a DOF coupled to nothing eliminated before it, negative for a negative pivot)."""
    digits: float
    """-log10(kept): decimal digits of K_ii lost by cancellation at the pivot
    (inf for a zero or negative pivot)."""


@dataclass(frozen=True)
class PivotLoss:
    """Digits lost at the pivots, -log10(D_ii / K_ii) (:mod:`conditioning.stages.pivots`).
    Which DOF shows the loss depends on the elimination order: it locates
    trouble, it does not bound the error."""

    worst: list[PivotEntry]
    """The rows that lose the most digits at their pivot, worst first."""
    max_digits: float
    """Largest ``digits`` (decimal digits; inf when a pivot is zero or negative)."""
    method: str
    """How the pivots were obtained (factorization and ordering), in words."""
    negative_pivots: list[PivotEntry] = field(default_factory=list)
    """Rows whose pivot is negative (at most ``worst`` of them, by row): K is
    indefinite and the DOF pushes back negatively once the DOFs
    eliminated before it are condensed out. ``kept`` = D_ii / K_ii < 0 for a
    positive diagonal; ``digits`` is inf."""
    negative_count: int = 0
    """Number of negative pivots in all (``negative_pivots`` lists at most
    ``worst`` of them): the count the reports show."""
    symmetric: bool = True
    """True when the pivots are those of an LDL^T (the row permutation equals
    the column permutation), so their signs are an inertia (Sylvester's law);
    False after unsymmetric row pivoting, when they are not."""
    kept_by_row: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """(n,) D_ii / K_ii of every row in row order, as ``kept`` of
    :class:`PivotEntry` (dimensionless; NaN for a row that was not factored:
    a row without stiffness, or one held because a penalty swallowed it).
    The same elimination order as ``method`` names; the JSON keeps 4
    significant figures, which fix the digits lost to 0.0002."""


# ----------------------------------------------------------------- digits
@dataclass(frozen=True)
class RefinementStep:
    """One residual of iterative refinement (:mod:`conditioning.linalg.refinement`)."""

    iteration: int
    """1-based count of residuals computed."""
    correction_norm: float
    """||dx||_inf / ||x||_inf after this step."""
    residual_norm: float
    """||f - K x||_inf / (||K||_inf ||x||_inf + ||f||_inf), residual in double-double."""


@dataclass(frozen=True)
class NodeDigits:
    """Trustworthy digits at one node."""

    node: int
    """Node id; the 1-based row without a DOF map."""
    digits: float
    """Trustworthy significant figures of the node's worst component,
    relative to the largest displacement of the same dof type."""


@dataclass(frozen=True)
class DigitsSample:
    """The digits one float64 solve keeps, measured against a reference solution."""

    sample: str
    """``load`` (one load case) or each case's name (the load file's column
    header, else ``load-1``...), ``random-1``..., ``worst-case``,
    ``solution`` (or ``solution (<case>)`` for several cases)."""
    trustworthy_digits: float
    """-log10 of the relative normwise forward error of the float64 solution
    against the reference (measured)."""
    digits_lost: float
    """log10(1/u) - trustworthy_digits with u = 2^-53 (about 15.95 digits)."""
    method: Literal["double-double refinement", "arbitrary precision", "certified (ball arithmetic)",
                    "certified (verified eigenvalue bound)"]
    """How the reference was obtained: measured against double-double
    refinement or a 60+ digit mpmath re-solve, or certified by a ball
    arithmetic re-solve (python-flint) or by the verified lower bound on the
    smallest eigenvalue with a rigorous residual."""
    converged: bool
    """True when the reference converged. False: ``trustworthy_digits`` is
    an upper estimate and cannot be trusted."""
    stop_reason: str
    """Why the reference computation stopped, and any caveat on the figure
    (at the reference's resolution; reference not converged), in words."""
    history: list[RefinementStep]
    """The refinement steps of the reference (empty for a reference that
    needed none)."""
    worst_nodes: list[NodeDigits]
    """Up to 10 nodes with the fewest trustworthy digits, fewest first."""
    normwise_bound: Optional[float]
    """Error bound on the reference in the manner of Demmel et al. (2006);
    None when the bound cannot be trusted (withdrawn)."""
    componentwise_bound: Optional[float]
    """max_i |x_i - x_ref,i| / |x_ref,i| bound on the reference; None when
    withdrawn (cannot be trusted) or not computed: only the first sample (the
    user's load, else random-1) gets one, as it costs a few solves each."""
    bound_trusted: bool
    """True when ``normwise_bound`` is given and trusted (always for a
    certified enclosure); False when the condition number is too large for
    the bound to hold."""
    confirmation: Optional[str] = None
    """How an independent re-solve confirmed the reference, if one ran."""
    per_dof_digits: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """(n,) trustworthy digits of each component, rounded down to 0.1 and
    clipped to 0 .. 15.95, relative to the typical displacement of its kind
    at its node (so a component that is nearly zero is not judged on its
    own); all 0 when the reference did not converge. None only in reports
    built without the digits stage; not serialised."""
    forward_error: Optional[float] = None
    """Measured ||x - x_ref||_inf / ||x_ref||_inf of the float64 (or audited)
    solution (dimensionless)."""
    resolution: Optional[float] = None
    """Relative accuracy of the reference itself (certified radius, error
    bound or estimate); trustworthy_digits never exceeds -log10 of it."""
    at_ceiling: bool = False
    """True when the measured error is below the reference's resolution, so
    trustworthy_digits is only the ceiling the measurement can show."""
    backward_error: Optional[float] = None
    """||f - K x||_inf / (||K||_inf ||x||_inf + ||f||_inf) of the measured
    solution, residual in double-double (dimensionless)."""
    solution: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """The float64 solution whose digits were measured (the tool's own solve,
    or the audited one), in K's DOF units; not serialised."""
    load_vector: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """The load f of this sample (force units); not serialised."""
    reference_hi: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """High part of the double-double refined solution of K x = f (DOF units),
    which the certification proves an error bound for; not serialised."""
    reference_lo: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """Low part of that refined solution; not serialised."""
    audited: bool = False
    """True for a supplied solution (``--solution``) measured for its audit,
    False for the tool's own float64 solve."""
    solve: str = ""
    """Whose solve the figure describes, in words: the tool's float64 direct
    solve (solver, pivoting, ordering), a pivoted LU of the same K, or the
    supplied solution; empty in reports built without the digits stage."""
    solver_kind: Literal["symmetric", "pivoted", "exported"] = "symmetric"
    """The kind of solver: ``symmetric`` (the tool's own solve, pivots on the
    diagonal in its fill-reducing order; also a supplied solution's sample)
    or ``pivoted`` (LU with partial pivoting of the same K, measured when K
    is indefinite or the symmetric elimination let round-off grow; the
    sample's name ends in ``(pivoted LU)``) or ``exported`` (when a penalty
    swallowed the structure: a float64 LU with partial pivoting of the
    exported K as stored, name ending in ``(exported K)``; the other samples
    are then of the model with the swallowed DOFs held)."""


@dataclass(frozen=True)
class SolutionAudit:
    """How well a supplied solution x_s fits this K and f.

    The normwise backward error eta(x) = ||f - K x||_inf / (||K||_inf
    ||x||_inf + ||f||_inf), with the residual in double-double, is the
    smallest relative change of K and f that x solves exactly (Rigal and
    Gaches 1967; Higham, *Accuracy and Stability of Numerical Algorithms*,
    2nd ed., Thm 7.1; from memory). A backward-stable float64 solve has
    eta of a few u; a supplied solution whose eta is far above the tool's own
    does not solve this K and f, whatever the conditioning.
    """

    backward_error: float
    """eta(x_s) (dimensionless)."""
    allowed_backward_error: Optional[float]
    """eta of the tool's own float64 solve of the same K and f: what this K
    allows; None when K is singular (no own solve)."""
    fits: bool
    """True when the vector solves K x = f to working precision
    (``backward_error`` at most FIT_FACTOR (100) times
    max(``allowed_backward_error``, u)) or to the precision it was written in
    (``fits_as_written``); False: it does not solve this K and f at any
    written precision (another load case, another DOF order, a solver that
    did not converge)."""
    digits_written: Optional[int]
    """Significant decimal digits the supplied values carry: the most any of
    up to 2,000 sampled entries needs to be reproduced exactly; None when
    they carry full float64 precision (17)."""
    free_mode_share: Optional[float]
    """Singular K only: ||P x_s||_inf / ||x_s||_inf, with P the orthogonal
    projector onto the free modes (the component K does not determine);
    None when K is nonsingular."""
    load_free_mode_share: Optional[float]
    """Singular K only: ||P f||_inf / ||f||_inf, the load's share along the
    free modes (nonzero: no static equilibrium exists); None otherwise."""
    trustworthy_digits: float
    """Digits of x_s that can be trusted, rounded down to 0.1: measured
    against the reference when K is nonsingular, else
    -log10(free_mode_share) (0 when the free-mode component is arbitrary)."""
    method: str
    """How ``trustworthy_digits`` was obtained."""
    case: Optional[str] = None
    """The load case this solution column answers (its name); None for a
    single load."""
    written_as: Optional[Literal["float32", "decimal"]] = None
    """The precision the supplied values were written in, read from the values
    themselves: ``float32`` (every entry a single-precision number, or its
    shortest or 9-figure decimal form), ``decimal`` (``digits_written``
    significant figures); None at full float64 precision."""
    written_digits: Optional[float] = None
    """Decimal digits that precision carries: ``digits_written`` for
    ``decimal``, log10(2^24) = 7.2 for ``float32``; None with ``written_as``."""
    written_backward_error: Optional[float] = None
    """The largest backward error rounding an exact solution to that precision
    can cause: || |K| e ||_inf / (||K||_inf ||x_s||_inf + ||f||_inf), with e_i
    the rounding bound of entry i (0.5 10^(1-p) |x_i|, and half a unit of the
    smallest last written decimal place; 2^-24 |x_i| for float32 values, 2^-23
    for their printed forms); None with ``written_as``."""
    fits_as_written: bool = False
    """True when ``backward_error`` is at most WRITTEN_FIT_FACTOR (16) times
    ``written_backward_error`` plus the own solve's: the vector solves K x = f
    to the precision it was written in (``fits`` is then True too)."""

    @property
    def written_text(self) -> Optional[str]:
        """``"single precision: about 7 digits"``, ``"written with 6 significant
        figures"``, or None at full float64 precision."""
        if self.written_as == "float32":
            return f"single precision: about {int(self.written_digits or 7)} digits"
        if self.written_as == "decimal" and self.written_digits is not None:
            p = int(self.written_digits)
            return f"written with {p} significant figure{'' if p == 1 else 's'}"
        return None


@dataclass(frozen=True)
class DigitsResult:
    """Digits measured per load sample, beside what the condition numbers predicted."""

    samples: list[DigitsSample]
    """One per load: the user's load cases (``load``, or one per column,
    fewest digits first), ``random-k``, ``worst-case``, then the audited
    supplied solutions (``audited``); empty when ``skipped``."""
    predicted_raw: Optional[float]
    """16 - log10(kappa_2 raw): the rule-of-thumb prediction (digits)."""
    predicted_scaled: Optional[float]
    """16 - log10(kappa_2(S)), the prediction from the scaled condition
    number (digits); None when K is singular or no condition was computed."""
    factorization_flops: float
    """Estimated operations of the shared factorization (see
    :attr:`FactorizationInfo.flops`), for the cost of the measurement."""
    summary: str
    """Which prediction was right and why, in one sentence."""
    skipped: Optional[str] = None
    """Why the stage did not run, if it did not."""
    audit: Optional["SolutionAudit"] = None
    """How the supplied solution fits K and f, when one was given; with
    several load cases, the worst of ``audits`` (one that does not fit,
    else the fewest digits)."""
    certification: Optional[str] = None
    """What the verified eigenvalue bound proved ("proved: lambda_min(S) >=
    ..."), or why it proved nothing (not positive definite at the shift, a
    rounding bound above the shift, not attempted); None when the stage
    did not get that far."""
    audits: list["SolutionAudit"] = field(default_factory=list)
    """One audit per load case of a supplied solution (its ``case`` names
    it), worst first; ``audit`` is the first. Empty without a solution."""
    headline_solve: Literal["symmetric", "pivoted", "exported"] = "symmetric"
    """Which solver kind the key figure and the verdict describe: the one a
    direct solver of this K would typically use (``pivoted`` when K is
    indefinite or the symmetric elimination let round-off grow and the
    pivoted LU was measured; ``exported`` when a penalty swallowed the
    structure and the exported K itself was measured, the held-DOF samples
    then being a prediction of the model after the suggested change; else
    ``symmetric``)."""
    exported_condition_at_least: Optional[float] = None
    """When a penalty swallowed the structure: a proved lower bound on the
    2-norm condition number of the exported K, max|K_ii| ||x||_2 / ||f||_2
    (||K||_2 >= max|K_ii|, ||K^-1||_2 >= ||K^-1 f||_2 / ||f||_2) from the
    certified solution of each measured load; None otherwise or when no
    reference solve ran."""
    exported_zero_modes: Optional[int] = None
    """When a penalty swallowed the structure: the number of eigenvalues of
    the exported K's scaled matrix (D^-1/2 K D^-1/2, as stored) that are zero
    at working precision (within ten times the stored K's resolution plus
    each eigenvalue's error bound, LAPACK eigh): the tied motions the penalty
    left without stiffness. The near-singular modes of ``spectrum`` are then
    those of the model with the swallowed DOFs held (a prediction after the
    suggested change). None otherwise, or when K is too large for a dense
    eigensolve (``exported_zero_modes_method`` says so)."""
    exported_zero_modes_method: str = ""
    """How ``exported_zero_modes`` was obtained, or why it was not."""
    headline_reason: str = ""
    """Why the pivoted LU was measured and is the key figure, or why it was
    not factored; or that K is singular at working precision but was factored
    without a zero pivot or shift, so the digits are of the float64 solve of
    the stored K as it is; empty when none of these applies."""


# --------------------------------------------------------------- findings
@dataclass(frozen=True)
class Finding:
    """One thing the diagnosis found, in the trade's terms (:mod:`conditioning.stages.findings`)."""

    severity: Severity
    """``error`` (the results of a solve cannot be trusted as they stand),
    ``warning`` (they may not be), ``note`` (worth knowing)."""
    code: str
    """Stable dotted code of this tool's own, one of
    :data:`conditioning.stages.findings.CODES`."""
    message: str
    """What was found, with its figures, in plain words."""
    nodes: list[int]
    """Nodes concerned (1-based rows without a DOF map); empty when the
    finding concerns the whole model."""
    advice: str
    """What to do about it; empty when nothing needs doing."""


@dataclass(frozen=True)
class ModelSummary:
    """What was read: the model the report is about."""

    source: str
    """Where K came from (a path, ``demo:<name>`` or ``"<array>"``)."""
    rows: int
    """Rows (DOFs) of K after any ``--fix`` restraints were removed."""
    stored_entries: int
    """Stored nonzeros of K, both triangles."""
    nodes: Optional[int]
    """Number of distinct nodes; None without a DOF map."""
    dim: Optional[int]
    """2 or 3, from the coordinates; None without coordinates."""
    dof_types: list[str]
    """DOF names present (``"ux"`` ... ``"rz"``), canonical order; empty without a DOF map."""
    has_load: bool
    """True when a load vector was given."""
    has_solution: bool
    """True when a displacement vector was given to be audited."""
    restrained: int
    """Rows and columns removed by ``--fix`` restraints."""
    notes: list[str]
    """How the input was read (mirroring, zeros dropped, restraints
    applied), in words."""
    fingerprint: str = ""
    """``"sha256:<hex>"`` of K as diagnosed (:func:`conditioning.model.matrix_fingerprint`):
    tells whether a saved report belongs to a matrix read later; empty when
    not computed."""


CAUTION = (
    "This report checks the numerics of the exported matrix, not the physics "
    "of the model: element choice, loads, supports and units are the "
    "engineer's responsibility. Defer to the applicable codes and to licensed "
    "engineering judgement before relying on any result."
)


# --------------------------------------------------------------- geometry
@dataclass(frozen=True)
class ModelGeometry:
    """The model as the views draw it: nodes, positions, the row map, K's node graph.

    Input data restated for the renderers, no diagnosis: built once per report
    by :func:`conditioning.stages.geometry.model_geometry`, so that the report
    is the views' only input. Not written to the JSON (the caller holds the
    input files; ``docs/report-format.md``, "Not in the JSON").
    """

    rows: int
    """Number of matrix rows (DOFs)."""
    diagonal: NDArray[np.float64] = field(repr=False)
    """(rows,) K_ii of each row, in K's units (force/length, moment/rotation)."""
    nodes: Optional[NDArray[np.int64]] = None
    """(m,) node ids of the DOF map, sorted ascending; None without a map."""
    row_node: Optional[NDArray[np.int64]] = field(default=None, repr=False)
    """(rows,) node id of each row (an entry of ``nodes``); None without a map."""
    row_dof: Optional[NDArray[np.int8]] = field(default=None, repr=False)
    """(rows,) index into :data:`DOF_NAMES` of each row's DOF; None without a map."""
    xyz: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """(m, 3) position of each of ``nodes``, in the model's length unit (z = 0
    for a 2D model); a row of NaN for a mapped node the coordinates do not
    list. None without a map or without coordinates."""
    dim: Optional[int] = None
    """2 or 3, as the coordinates were read; None without coordinates."""
    edges: Optional[NDArray[np.intp]] = field(default=None, repr=False)
    """(e, 2) node pairs coupled by a stored off-diagonal entry of K, as
    indices into ``nodes`` (first < second, each pair once): the element
    edges as K's graph shows them. None without a map, or when there are
    more than :data:`conditioning.stages.geometry.MAX_EDGES` (then the views
    draw the nodes only)."""
    other_nodes: Optional[NDArray[np.int64]] = field(default=None, repr=False)
    """(p,) ids of nodes the coordinates list but the DOF map does not (nodes
    with every DOF restrained, or unused), sorted ascending; K holds nothing
    about them, so no edge reaches them. None without a map or coordinates."""
    other_xyz: Optional[NDArray[np.float64]] = field(default=None, repr=False)
    """(p, 3) positions of ``other_nodes``, in the model's length unit (z = 0
    for a 2D model); None when ``other_nodes`` is."""
    lacks_dofs: Optional[NDArray[np.bool_]] = field(default=None, repr=False)
    """(m,) True for a node of ``nodes`` without some DOF that other nodes
    carry (a restrained DOF removed from K, or an element type without it);
    None without a map."""
    elements: Optional[ElementTable] = field(default=None, repr=False)
    """The element table (``--elements``) for the views (cells of the mode
    files); None without one."""

    def node_index(self) -> NDArray[np.intp]:
        """(rows,) position in ``nodes`` of each row's node (requires a map)."""
        return np.searchsorted(self.nodes, self.row_node)

    def has_position(self) -> NDArray[np.bool_]:
        """(m,) True where the node's position is known (all False without coordinates)."""
        if self.nodes is None:
            return np.zeros(0, dtype=bool)
        if self.xyz is None:
            return np.zeros(self.nodes.size, dtype=bool)
        return ~np.isnan(self.xyz).any(axis=1)


#: Element kinds of an element table (:class:`ElementTable`), by corner
#: layout and node count; the corner nodes come first (the usual ordering of
#: open mesh formats such as Gmsh and VTK).
ELEMENT_KINDS: tuple[str, ...] = ("line2", "tri3", "tri6", "quad4", "quad8", "quad9",
                                  "tet4", "tet10", "hex8", "hex20")


@dataclass(frozen=True)
class ElementTable:
    """Element connectivity as the user gave it (``--elements``), read by
    :func:`conditioning.io.elements.read_elements`. Input restated, no diagnosis."""

    ids: NDArray[np.int64] = field(repr=False)
    """(e,) element ids as the user numbered them, in file order."""
    kind: NDArray[np.int8] = field(repr=False)
    """(e,) index into :data:`ELEMENT_KINDS` of each element."""
    offsets: NDArray[np.intp] = field(repr=False)
    """(e + 1,) start of each element's nodes in ``nodes``."""
    nodes: NDArray[np.int64] = field(repr=False)
    """Node ids of every element, element after element, in the order given."""
    source: str = "<array>"
    """Where the table came from (a path or ``"<array>"``)."""

    def __len__(self) -> int:
        return int(self.ids.size)

    def nodes_of(self, k: int) -> NDArray[np.int64]:
        """Node ids of the k-th element (0-based position in the table)."""
        return self.nodes[self.offsets[k]:self.offsets[k + 1]]

    def kind_name(self, k: int) -> str:
        return ELEMENT_KINDS[int(self.kind[k])]


@dataclass(frozen=True)
class CoincidentNodes:
    """Nodes at one place (:mod:`conditioning.stages.node_geometry`): closer to
    each other than the tolerance, which is a share of the local member length."""

    nodes: list[int]
    """Node ids of the group; when a near-singular mode moves them apart,
    the nodes it moves first, then those that stay."""
    position: list[float]
    """[x, y, z] of the first node (model length unit; z = 0 in 2D)."""
    separation: float
    """Largest distance between two nodes of the group (model length unit;
    0.0 for nodes at exactly one place)."""
    tolerance: float
    """Distance below which two nodes were taken as one place (model length
    unit): :data:`conditioning.stages.node_geometry.COINCIDENT_SHARE` times the
    shortest member at the nodes."""
    joined: Literal["no", "partly"]
    """``no``: K couples no DOF of one node to any DOF of another (the nodes
    were never merged or tied); ``partly``: K ties some DOF types between them
    and leaves others free (a hinge or release modelled with duplicate nodes).
    Groups that K ties in every DOF type they share are not listed."""
    tied: list[str]
    """DOF types K couples between the nodes (``ux`` ... ``rz``); empty when
    ``joined`` is ``no``."""
    free: list[str]
    """DOF types the nodes share that K does not couple between them."""
    parts: list[int]
    """1-based connected parts (:attr:`StructureResult.part_of_row`) of the nodes."""
    moved_apart_by: list[int]
    """1-based near-singular modes (:attr:`SpectrumResult.modes`) in which the
    nodes move apart (relative displacement at least
    :data:`conditioning.stages.node_geometry.APART_SHARE` of the mode's
    largest): merging or tying them removes that freedom. Empty when none does."""


@dataclass(frozen=True)
class TouchingParts:
    """A connected part whose nodes come close to another part's without
    sharing stiffness with it (:mod:`conditioning.stages.node_geometry`): two
    parts meshed separately, resting on each other with nodes that do not
    coincide (a block on a pedestal), or separated by a small gap."""

    part: int
    """The part (1-based, as :attr:`NearSingularMode.part`); the one with free
    modes when one of the two has them."""
    other_part: int
    """The part it comes close to (1-based)."""
    gap: float
    """Smallest distance from a node of ``part`` to a node of ``other_part``
    (model length unit)."""
    share: float
    """Smallest of those distances over the shortest member at the node
    (dimensionless); at most :data:`conditioning.stages.node_geometry.TOUCH_SHARE`."""
    nodes: list[int]
    """Nodes of ``part`` that close to ``other_part``."""
    other_nodes: list[int]
    """Their nearest nodes of ``other_part``."""
    moved_apart_by: list[int]
    """1-based near-singular modes of ``part`` (rigid-body or mechanism):
    tying the parts removes them. Empty when it has none."""


@dataclass(frozen=True)
class FarNode:
    """A node far from every node K couples it to (:mod:`conditioning.stages.node_geometry`):
    a coordinate in the wrong unit or with a typo, or a reference node coupled on purpose."""

    node: int
    """Node id."""
    position: list[float]
    """[x, y, z] as read (model length unit; z = 0 in 2D)."""
    nearest: float
    """Distance to the nearest node K couples it to (model length unit)."""
    nearest_node: int
    """That node's id."""
    usual_length: float
    """Median over its coupled nodes of their own usual member length (the
    lower median of the distances to the nodes each is coupled to), model
    length unit: how long members are where this node attaches."""
    ratio: float
    """``nearest / usual_length`` (dimensionless); listed above
    :data:`conditioning.stages.node_geometry.FAR_FACTOR`."""
    neighbours: list[int]
    """Ids of the nodes K couples it to."""
    softer: Optional[float]
    """Median K_jj of its coupled nodes' translation rows over the median
    K_ii of its own (dimensionless; above 1 when its rows are softer); None
    when it has no translation rows or they have no coupled counterpart."""
    rows: list[int]
    """Its 0-based matrix rows."""


@dataclass(frozen=True)
class ElementQuality:
    """One element whose shape fails a common-practice check
    (:mod:`conditioning.stages.element_quality`; corner nodes only)."""

    element: int
    """Element id as the user numbered it."""
    kind: str
    """One of :data:`ELEMENT_KINDS`."""
    nodes: list[int]
    """Its node ids, as given."""
    aspect_ratio: float
    """Longest edge over shortest edge (dimensionless; inf for a zero-length edge)."""
    min_angle: Optional[float]
    """Smallest corner angle of its faces, degrees; None for a line."""
    max_angle: Optional[float]
    """Largest corner angle of its faces, degrees; None for a line."""
    warping: Optional[float]
    """Quadrilateral faces: largest angle between the normals of the two
    triangles either diagonal splits a face into, degrees (0 for a plane
    face); None for other kinds."""
    scaled_jacobian: float
    """Smallest corner Jacobian determinant over the product of the corner's
    edge lengths, signed relative to the element's own orientation (the sign
    of the sum of its corner Jacobians; dimensionless: the sine of the corner angle for a face; 1 for a
    rectangle or a box; 1/sqrt(2) at the corners of a regular tetrahedron;
    0 for a collapsed corner; negative for an inverted one)."""
    jacobian_ratio: float
    """Smallest over largest corner Jacobian determinant, signed as above (1
    for a parallelogram or a parallelepiped; at most 0 when inverted)."""
    problems: list[str]
    """What fails: ``inverted``, ``collapsed``, ``aspect ratio``, ``angle``,
    ``warping``, ``scaled Jacobian``, ``jacobian ratio`` (thresholds in
    :attr:`GeometryChecks.thresholds`)."""


@dataclass(frozen=True)
class GeometryChecks:
    """The model's geometry read as geometry (:mod:`conditioning.stages.node_geometry`
    and :mod:`conditioning.stages.element_quality`)."""

    method: str
    """How the checks were made, in words (what was compared with what)."""
    coincident: list[CoincidentNodes]
    """Groups of coincident nodes that K does not join, or joins only in some
    DOF types; empty when none."""
    far: list[FarNode]
    """Nodes far from every node K couples them to; empty when none."""
    touching: list[TouchingParts] = field(default_factory=list)
    """Parts close to another part that share no stiffness with it (nodes
    that do not coincide); empty when none."""
    coincident_total: int = 0
    """Groups of ``coincident`` found, all counted (the list keeps at most
    :data:`conditioning.stages.node_geometry.MAX_GROUPS`)."""
    elements: Optional[int] = None
    """Elements read from ``--elements``; None without an element table."""
    element_kinds: dict[str, int] = field(default_factory=dict)
    """Elements per kind (:data:`ELEMENT_KINDS`); empty without a table."""
    flagged_elements: list[ElementQuality] = field(default_factory=list)
    """Elements whose shape fails a check, worst first (at most
    :data:`conditioning.stages.element_quality.MAX_LISTED`)."""
    flagged_count: dict[str, int] = field(default_factory=dict)
    """Elements failing each check (``inverted``, ``collapsed``, ...), all of them counted."""
    thresholds: dict[str, float] = field(default_factory=dict)
    """The limits used, by name (tolerances and element-shape limits; their
    sources are in the stage modules: the project's choice or common practice)."""


@dataclass(frozen=True)
class Report:
    """Everything the diagnosis found; the renderers' only input."""

    summary: ModelSummary
    """The model the report is about."""
    structure: StructureResult
    """Checks that need no factorization (always run)."""
    factorization: Optional[FactorizationInfo]
    """What the shared factorization did; None when none ran (the factor
    would not fit in memory)."""
    condition: Optional[ConditionResult]
    """Condition numbers (without a factorization only the scaled one); None
    when the stage did not run."""
    spectrum: Optional[SpectrumResult]
    """Smallest eigenvalues of S and the near-singular modes; None when the
    stage did not run."""
    restraints: list[Restraint]
    """A minimal set of supports that removes the near-singular modes; empty
    when there are none."""
    jumps: list[StiffnessJump]
    """Stiffness jumps, costliest first; empty when none was found."""
    pivots: Optional[PivotLoss]
    """Digits lost at the pivots of the factorization; None without one."""
    digits: Optional[DigitsResult]
    """Digits measured per load; None when not measured (measurement turned
    off, or no factorization)."""
    findings: list[Finding]
    """Everything found, errors first."""
    verdict: str
    """One line: the cause first (one of
    :data:`conditioning.stages.findings.CAUSES`), then what it means for the
    digits of a solve."""
    status: Literal["healthy", "warnings", "errors"]
    """The worst severity among ``findings``; decides the exit status."""
    timings: dict[str, float]
    """Wall time per stage (s)."""
    caution: str = CAUTION
    """What the report does not check (the physics of the model), always shown."""
    seed: Optional[int] = None
    """Seed of the run's random generator (``diagnose(seed=...)``): the same
    seed repeats every figure; None when not recorded."""
    skipped: dict[str, str] = field(default_factory=dict)
    """Stages that did not run, stage name -> why (their results are None):
    e.g. ``"digits"`` without a factorization or with ``measure=False``."""
    geometry: Optional[ModelGeometry] = None
    """Nodes, positions, row map and node graph for the figures and mode
    files; None when the report was built without a model (then the views
    draw the spectrum only and number rows instead of nodes)."""
    geometry_checks: Optional[GeometryChecks] = None
    """Coincident nodes, misplaced nodes and element shapes; None when the
    model has no DOF map or no coordinates (``skipped["geometry checks"]`` says why)."""


# ---------------------------------------------------------------- explain
@dataclass(frozen=True)
class RowCoupling:
    """One off-diagonal stiffness of an explained row (:mod:`conditioning.stages.explain`)."""

    row: int
    """0-based matrix row it couples to."""
    label: str
    """That row in words (``"node 12 uy"`` or ``"row 37"``)."""
    value: float
    """K_ij in K's units (force/length, moment/rotation or mixed)."""
    strength: float
    """|K_ij| / sqrt(|K_ii K_jj|): the coupling of the scaled matrix S
    (dimensionless; at most 1 for a positive definite K)."""


@dataclass(frozen=True)
class ModeShare:
    """How much of one near-singular mode lives at the explained row."""

    mode: int
    """1-based index in :attr:`SpectrumResult.modes`."""
    kind: str
    """The mode's kind (``rigid-body``, ``mechanism``, ``dof-without-stiffness``)."""
    eigenvalue: float
    """The mode's eigenvalue of S (dimensionless)."""
    share: float
    """v_i^2 / ||v||_2^2 for the scaled mode v = D^1/2 u (dimensionless, 0..1):
    the row's share of the mode's motion, weighted as the modes stage weighs
    nodes."""
    exact: bool = False
    """True when the eigenvalue is zero at working precision (its digits are
    round-off), as :attr:`NearSingularMode.exact`."""


@dataclass(frozen=True)
class RowExplanation:
    """What is at one matrix row and why it matters (:func:`conditioning.stages.explain.explain_row`)."""

    row: int
    """0-based matrix row explained."""
    row_base: int
    """The numbering the row was asked in (1: first row is 1; 0: first row is 0)."""
    label: str
    """The row in words (``"node 12 uy"`` or ``"row 37"``, 1-based)."""
    node: Optional[int]
    """Its node id; None without a DOF map."""
    dof: Optional[str]
    """Its DOF name (``ux`` ... ``rz``); None without a DOF map."""
    diagonal: float
    """K_ii in K's units (force/length or moment/rotation)."""
    neighbour_diagonal: Optional[float]
    """Median K_jj of the rows it is coupled to that have its DOF type (K's
    units); None when it is coupled to none."""
    type_diagonal: Optional[float]
    """Median K_jj of every row of its DOF type (all rows without a DOF map)."""
    couplings: list[RowCoupling]
    """Its strongest couplings, strongest (in |K_ij| / sqrt(|K_ii K_jj|)) first."""
    jumps: list[StiffnessJump]
    """The stiffness jumps the row belongs to."""
    pivot_kept: Optional[float]
    """D_ii / K_ii at its pivot in this tool's elimination order (``pivot_method``;
    from a saved report, the earlier run's, to 4 significant figures); None
    when K is singular (no unshifted factorization)."""
    pivot_digits: Optional[float]
    """-log10(pivot_kept): digits of K_ii lost at the pivot in that order (inf
    for a zero or negative pivot); None with ``pivot_kept``."""
    least_kept: Optional[float]
    """1 / (K_ii (K^-1)_ii): the smallest share any elimination order can
    leave (the pivot when the row is eliminated last); None when K is
    singular, and from a saved report. The pivot of a positive definite K lies between 1/(K^-1)_ii
    and K_ii whatever the order."""
    most_digits: Optional[float]
    """log10(K_ii (K^-1)_ii): the most digits any elimination order can lose
    at this pivot (0 is the least: the row eliminated first); None with
    ``least_kept``, and when explained from a saved report (it needs
    (K^-1)_ii, one solve with a factorization)."""
    pivot_method: str
    """How the pivot was obtained (factorization and ordering), or why not."""
    mode_shares: list[ModeShare]
    """Its share of each near-singular mode, in the modes' order; empty
    without modes."""
    advice: list[str]
    """What would help at this row, in plain words; the suggested
    restraint(s) first."""
    from_report: Optional[str] = None
    """The JSON report of an earlier run that the pivot, near-singular modes,
    stiffness jumps and suggested supports were read from (as the user named
    it); no factorization was made for this explanation. None when they were
    computed for it."""
