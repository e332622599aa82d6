"""Penalties that swallow the structure, and negative pivots (issue 9, items 6 and 7).

Invented models (not real structures): a plane portal frame whose beam end is
a separate coincident node tied to the column top by penalty springs, and a
cantilever column under a compressive geometric stiffness beyond its Euler
load. Outside references named beside each check: IEEE float64 rounding
through numpy.spacing, LAPACK through numpy (eigvalsh inertia, slogdet of the
leading minors), scipy.linalg.ldl (LAPACK sytrf) inertia, and the Euler
buckling load of a cantilever, pi^2 EI / (4 H^2) (closed form).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg as la
import scipy.sparse as sp

import conditioning
from conditioning.demo.assemble import Assembly, apply_restraints, combine, frame2d, load_vector, spring
from conditioning.model import Coordinates, Model

E, A, I = 210000.0, 5380.0, 8.36e7       # N/mm^2, mm^2, mm^4 (a steel I-section, invented)
H, W, PARTS = 3000.0, 5000.0, 4           # mm; members split into PARTS elements
TOP, TIED = PARTS + 11, 99                # right column top; the beam end tied to it


def tied_portal(factor: float) -> Model:
    """Portal frame, pinned bases (nodes 1 and 11), beam end node 99 coincident
    with the right column top node 15 and tied to it in ux and uy by springs of
    ``factor`` times the beam element's axial stiffness EA/L (N, mm)."""
    xy, members = {}, []

    def chain(ids, p0, p1):
        for k, node in enumerate(ids):
            xy[node] = p0 + (p1 - p0) * k / (len(ids) - 1)
        members.extend(zip(ids[:-1], ids[1:]))

    left, right = list(range(1, PARTS + 2)), list(range(11, PARTS + 12))
    chain(left, np.array([0.0, 0.0]), np.array([0.0, H]))
    chain(right, np.array([W, 0.0]), np.array([W, H]))
    chain([left[-1], *range(21, 20 + PARTS), TIED], np.array([0.0, H]), np.array([W, H]))
    nodes = np.array(sorted(xy))
    pos = np.array([xy[v] for v in nodes])
    asm = frame2d(nodes, pos, np.array(members), E=E, A=A, I=I)
    for d in ("ux", "uy"):
        asm = spring(asm, (TOP, d), (TIED, d), factor * E * A / (W / PARTS))
    asm = apply_restraints(asm, [(1, "ux"), (1, "uy"), (11, "ux"), (11, "uy")])
    coords = Coordinates(node=nodes.astype(np.int64), xyz=np.c_[pos, np.zeros(nodes.size)], dim=2)
    f = load_vector(asm.dofs, {(left[-1], "ux"): 1000.0, (21, "uy"): -5000.0})
    return Model(asm.K, dofs=asm.dofs, coords=coords, load=f)


def rows_of(model: Model, node: int, dof: str) -> int:
    names = ("ux", "uy", "uz", "rx", "ry", "rz")
    return int(np.flatnonzero((model.dofs.node == node) & (model.dofs.dof == names.index(dof)))[0])


# ------------------------------------------------------------- swallowing penalty


def test_penalty_1e20_has_really_swallowed_the_diagonal():
    """Check of the scenario itself: with the tie at 1e20 x EA/L the stored
    diagonal at the tied DOFs equals the penalty exactly (IEEE rounding: the
    structural stiffness is below half an ulp, numpy.spacing), and K is
    singular at working precision along the tie (LAPACK eigvalsh of the
    scaled matrix: an eigenvalue below n eps lambda_max)."""
    model = tied_portal(1e20)
    P = 1e20 * E * A / (W / PARTS)
    a, b = rows_of(model, TOP, "ux"), rows_of(model, TIED, "ux")
    K = model.K.toarray()
    assert K[a, a] == K[b, b] == -K[a, b] == P
    assert E * A / (W / PARTS) < np.spacing(P) / 2
    s = 1 / np.sqrt(np.abs(np.diag(K)))
    lam = np.linalg.eigvalsh(s[:, None] * K * s)
    assert np.min(np.abs(lam)) < K.shape[0] * np.finfo(float).eps * lam[-1]


def test_swallowing_penalty_is_a_jump_not_a_mechanism():
    """The 1e20 tie: one error finding stiffness.penalty-swallowed naming nodes
    15 and 99; no rigid-body mode, no mechanism, no suggested restraint; the
    verdict starts with the cause; digits are measured on the rest."""
    report = conditioning.diagnose(tied_portal(1e20), samples=1)
    codes = [f.code for f in report.findings]
    assert "stiffness.penalty-swallowed" in codes
    assert not {"support.mechanism", "support.rigid-body-mode"} & set(codes)
    assert report.spectrum.modes == [] and report.restraints == []
    (finding,) = [f for f in report.findings if f.code == "stiffness.penalty-swallowed"]
    assert finding.severity == "error" and finding.nodes == [TOP, TIED]
    assert "not a mechanism" in finding.message and "no restraint" in finding.message
    (jump,) = [j for j in report.jumps if j.swallowed]
    model = tied_portal(1e20)
    assert jump.rows == sorted(rows_of(model, v, d) for v in (TOP, TIED) for d in ("ux", "uy"))
    assert jump.structure_digits_kept == 0.0 and jump.digits_cost == pytest.approx(53 * math.log10(2))
    assert report.verdict.startswith("stiffness jump: a penalty swallowed the structure at nodes 15, 99")
    assert report.digits is not None and report.digits.skipped is None and report.digits.samples
    assert "held" in report.digits.summary


def test_digits_of_the_rest_match_lapack_on_the_held_model():
    """The digits measured with the tied rows held are those of K without those
    rows and columns: its float64 solve (LAPACK, numpy.linalg.solve) agrees
    with the rest's reference to about the reported digits, and the condition
    figure is that submatrix's (numpy.linalg.cond of the scaled rest, 2-norm).
    The held DOFs show 0 digits per DOF (all lost)."""
    model = tied_portal(1e20)
    report = conditioning.diagnose(model, samples=1)
    held = [j for j in report.jumps if j.swallowed][0].rows
    keep = np.setdiff1d(np.arange(model.n), held)
    Kr = model.K.toarray()[np.ix_(keep, keep)]
    s = 1 / np.sqrt(np.diag(Kr))
    assert report.condition.scaled_estimate == pytest.approx(np.linalg.cond(s[:, None] * Kr * s), rel=1e-3)
    load = [x for x in report.digits.samples if x.sample == "load"][0]
    assert load.trustworthy_digits > 10
    assert load.trustworthy_digits <= 16 - math.log10(np.linalg.cond(Kr)) + 8  # a loose sanity cap
    assert np.all(load.per_dof_digits[held] == 0.0)
    assert np.all(load.per_dof_digits[keep] > 10)


def test_nearly_swallowing_penalty_keeps_a_few_digits_of_the_structure():
    """At 1e14 x EA/L the diagonal still holds log10(k / ulp(P)) digits of the
    structure (numpy.spacing), about 2, but K is singular at working
    precision along the tie: still swallowed, never a mechanism."""
    report = conditioning.diagnose(tied_portal(1e14), samples=1)
    (jump,) = [j for j in report.jumps if j.swallowed]
    P = 1e14 * E * A / (W / PARTS)
    assert jump.structure_digits_kept == pytest.approx(math.log10(jump.structural_stiffness / np.spacing(P)),
                                                       abs=0.05)
    assert 1.0 < jump.structure_digits_kept < 3.0
    assert report.spectrum.modes == [] and report.restraints == []


def test_stiff_but_not_swallowing_penalty_stays_a_normal_jump():
    """At 1e8 x EA/L the structure survives in K (about 8 of its digits,
    numpy.spacing): an ordinary coupling jump (code stiffness.jump), not
    swallowed, digits measured on the whole K, no mode and no restraint."""
    report = conditioning.diagnose(tied_portal(1e8), samples=1)
    codes = [f.code for f in report.findings]
    assert "stiffness.penalty-swallowed" not in codes and "stiffness.jump" in codes
    (jump,) = report.jumps
    assert not jump.swallowed and jump.kind == "coupling" and jump.nodes == [TOP, TIED]
    assert 7 < jump.structure_digits_kept < 9
    assert report.spectrum.modes == [] and report.restraints == []
    assert "held" not in report.digits.summary
    assert report.digits.samples[0].per_dof_digits.shape == (tied_portal(1e8).n,)


def test_swallowed_finding_renders_at_80_columns():
    """The terminal report of the 1e20 tie names the cause and shows no
    restraint section (rich at 80 columns)."""
    from rich.console import Console

    from conditioning.render.terminal import TerminalReport

    console = Console(width=80, record=True, color_system=None)
    console.print(TerminalReport(conditioning.diagnose(tied_portal(1e20), samples=1)))
    text = console.export_text()
    assert "swallowed" in text and "mechanism" not in text.replace("not a mechanism", "")


# ------------------------------------------------------------------ negative pivot


def compressed_cantilever(times_euler: float, parts: int = 6) -> Model:
    """A cantilever column (fixed at node 1, along y) under an axial
    compression of ``times_euler`` x pi^2 EI / (4 H^2), entered as the
    consistent geometric stiffness of each beam element in (ux, rz) (N, mm)."""
    P = times_euler * math.pi**2 * E * I / (4 * H**2)
    nodes = np.arange(1, parts + 2)
    xy = np.c_[np.zeros(parts + 1), np.linspace(0, H, parts + 1)]
    asm = frame2d(nodes, xy, np.c_[nodes[:-1], nodes[1:]], E=E, A=A, I=I)
    L = H / parts
    kg = P / (30 * L) * np.array([[36, 3 * L, -36, 3 * L], [3 * L, 4 * L * L, -3 * L, -L * L],
                                  [-36, -3 * L, 36, -3 * L], [3 * L, -L * L, -3 * L, 4 * L * L]])
    flip = np.diag([-1.0, 1.0, -1.0, 1.0])  # local transverse v = -ux for a member along +y
    kg = flip @ kg @ flip
    K = asm.K.tolil()
    for e in range(parts):
        r = [3 * e, 3 * e + 2, 3 * e + 3, 3 * e + 5]
        for i in range(4):
            for j in range(4):
                K[r[i], r[j]] -= kg[i, j]
    asm = apply_restraints(Assembly(sp.csr_array(K), asm.dofs), [(1, "ux"), (1, "uy"), (1, "rz")])
    coords = Coordinates(node=nodes.astype(np.int64), xyz=np.c_[xy, np.zeros(parts + 1)], dim=2)
    return Model(asm.K, dofs=asm.dofs, coords=coords, load=load_vector(asm.dofs, {(parts + 1, "ux"): 100.0}))


def test_cantilever_geometric_stiffness_matches_euler_load():
    """Check of the scenario: the compressed cantilever loses positive
    definiteness just above the Euler load (closed form pi^2 EI / 4H^2, the
    six-element consistent geometric stiffness is within 0.1 % of it): LAPACK
    eigvalsh gives no negative eigenvalue at 0.999 and one at 1.002."""
    assert np.linalg.eigvalsh(compressed_cantilever(0.999).K.toarray())[0] > 0
    lam = np.linalg.eigvalsh(compressed_cantilever(1.002).K.toarray())
    assert lam[0] < 0 < lam[1]


def test_negative_pivot_beyond_buckling_is_named_with_its_dof():
    """Beyond the Euler load (1.5 x): one negative pivot, reported with code
    factor.negative-pivot at its node and DOF, never as 'inf digits' lost at a pivot.
    Outside references: the count equals LAPACK's inertia (numpy eigvalsh) and
    scipy.linalg.ldl's (sytrf, Bunch-Kaufman) count of negative eigenvalues of D."""
    model = compressed_cantilever(1.5)
    report = conditioning.diagnose(model, samples=1)
    Kd = model.K.toarray()
    n_neg = int(np.sum(np.linalg.eigvalsh(Kd) < 0))
    _, D, _ = la.ldl(Kd)
    assert n_neg == 1 == int(np.sum(np.linalg.eigvalsh(D) < 0))
    assert len(report.pivots.negative_pivots) == n_neg == report.factorization.negative_pivots
    (finding,) = [f for f in report.findings if f.code == "factor.negative-pivot"]
    entry = report.pivots.negative_pivots[0]
    assert finding.severity == "error" and entry.label in finding.message
    # The nodes the negative eigenvector lives on come first (LAPACK's eigenvector of the
    # scaled matrix, per-node weight sum v_i^2), the pivot's node after them.
    d = 1.0 / np.sqrt(np.abs(np.diag(Kd)))
    w, V = np.linalg.eigh(d[:, None] * Kd * d[None, :])
    weights = np.bincount(model.dofs.node, weights=V[:, 0] ** 2)
    assert finding.nodes[0] == int(np.argmax(weights))
    assert "The elimination met it at " + entry.label in finding.message
    assert "buckling" in finding.advice and "negative stiffness" in finding.advice
    assert not any("inf digits" in f.message for f in report.findings)
    assert report.verdict.startswith("indefinite: 1 negative eigenvalue, its eigenvector at node")


def test_negative_pivot_row_matches_leading_minors_in_natural_order():
    """A negative spring to ground of 3 x the chain stiffness at node 8 of a
    fixed-free chain of unit springs, eliminated in natural order: the pivot k
    is det(K_1..k) / det(K_1..k-1) (LAPACK slogdet of the leading minors), so
    the first negative pivot is where that ratio first turns negative; the
    finding names that node and DOF."""
    from conditioning.model import DofTable

    n = 12
    K = sp.diags_array([-np.ones(n - 1), np.r_[2 * np.ones(n - 1), 1.0], -np.ones(n - 1)],
                       offsets=[-1, 0, 1]).tolil()
    K[7, 7] -= 3.0
    K = sp.csr_array(K)
    table = DofTable(node=np.arange(1, n + 1, dtype=np.int64), dof=np.ones(n, dtype=np.int8))
    report = conditioning.diagnose(Model(K, dofs=table), ordering="NATURAL", samples=1)
    signs = [np.linalg.slogdet(K.toarray()[:k, :k])[0] for k in range(1, n + 1)]
    pivot_signs = [signs[0]] + [signs[k] * signs[k - 1] for k in range(1, n)]
    expected = [k for k in range(n) if pivot_signs[k] < 0]
    assert [e.row for e in report.pivots.negative_pivots] == expected
    (finding,) = [f for f in report.findings if f.code == "factor.negative-pivot"]
    assert f"node {expected[0] + 1} uy" in finding.message
