"""Supported or singular, decided by proof (issue 22, Build 1).

Outside truth:
- scikit-fem assembles the clamped slender strip (plane-stress bilinear quads);
- python-flint brackets the smallest eigenvalue of the scaled matrix by two
  inertia counts of S - cI (Sylvester's law), each from an L D L^T in ball
  arithmetic written here (every ball excludes zero: the exact pivots have
  the balls' signs), independent of the tool's own proofs;
- the true error of the tool's own float64 solution comes from one step of
  refinement whose residual f - K x is exact (python-flint rationals) and whose
  correction is solved by SuperLU (scipy): its relative error is about
  kappa u, far below the 0.5 digit compared;
- LAPACK (numpy.linalg.eigvalsh) shows that lambda_min(S) is below
  n eps lambda_max(S), the old worst-case zero level.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

flint = pytest.importorskip("flint")
skfem = pytest.importorskip("skfem")

from conditioning.demo.assemble import apply_restraints, frame2d, truss2d  # noqa: E402
from conditioning.linalg.floating_point import EPS  # noqa: E402
from conditioning.model import Coordinates, Model  # noqa: E402
from conditioning.pipeline import diagnose  # noqa: E402
from conditioning.stages.findings import own_samples  # noqa: E402

import fe_reference as fr  # noqa: E402


def clamped_strip(nx=200, length=5000.0, depth=1.0) -> Model:
    """A strip of nx x 1 plane-stress quads (scikit-fem), clamped at x = 0."""
    mesh = skfem.MeshQuad.init_tensor(np.linspace(0, length, nx + 1), np.linspace(0, depth, 2))
    ref = fr.quad_plate(mesh.p, mesh.t, E=210000.0, nu=0.3, thickness=1.0)
    fixed = [(int(node), c) for node, p in zip(ref.coords.node, ref.coords.xyz) if p[0] == 0.0
             for c in ("ux", "uy")]
    ref = fr.restrained(ref, fixed)
    return Model(ref.K, dofs=ref.dofs, coords=ref.coords)


def clamped_cantilever(elements=1000, length=10000.0) -> Model:
    """Euler-Bernoulli beam elements (the demo assembler), clamped at node 1."""
    nodes = np.arange(1, elements + 2)
    xy = np.column_stack([np.linspace(0, length, elements + 1), np.zeros(elements + 1)])
    a = frame2d(nodes, xy, np.column_stack([nodes[:-1], nodes[1:]]), E=210000.0, A=1000.0, I=1e5)
    a = apply_restraints(a, [(1, "ux"), (1, "uy"), (1, "rz")])
    xyz = np.zeros((elements + 1, 3))
    xyz[:, :2] = xy
    return Model(a.K, dofs=a.dofs, coords=Coordinates(nodes, xyz, 2))


def scaled(K):
    s = 1 / np.sqrt(K.diagonal())
    return sp.csr_array(sp.diags(s) @ K @ sp.diags(s))


def ball_count_below(S, c, bits):
    """Eigenvalues of S below c by a ball-arithmetic L D L^T of S - cI (banded, RCM order);
    None when a pivot's ball contains zero."""
    perm = sp.csgraph.reverse_cuthill_mckee(sp.csr_matrix(S), symmetric_mode=True)
    P = sp.coo_array(S[perm][:, perm])
    n = P.shape[0]
    rows, cols, vals = P.row, P.col, P.data
    band = int(np.max(np.abs(rows - cols)))
    with flint.ctx.workprec(bits):
        arb = flint.arb
        W = [dict() for _ in range(n)]     # W[i][j] = entry (i, j), j <= i, within the band
        for i, j, v in zip(rows, cols, vals):
            if j <= i:
                W[i][j] = W[i].get(j, arb(0)) + arb(float(v))
        for i in range(n):
            W[i][i] = W[i][i] - arb(float(c))
        negative = 0
        for j in range(n):
            p = W[j][j]
            if p.contains(0):
                return None
            negative += p < 0
            for i in range(j + 1, min(n, j + band + 1)):
                lij = W[i].get(j)
                if lij is None:
                    continue
                m = lij / p
                for k in range(j + 1, i + 1):
                    ukj = W[k].get(j)
                    if ukj is not None:
                        W[i][k] = W[i].get(k, arb(0)) - m * ukj
        return negative


def bracket(S, lam, bits):
    """(lo, hi) with lo < lambda_min(S) < hi proved by two ball inertia counts."""
    assert ball_count_below(S, 0.9 * lam, bits) == 0
    assert ball_count_below(S, 1.1 * lam, bits) >= 1
    return 0.9 * lam, 1.1 * lam


def true_digits(K, x, f):
    """-log10 of ||x - x*||_inf / ||x*||_inf with x* = x + K^-1 (f - K x), the residual exact."""
    Kc = sp.coo_array(K)
    xq = [flint.fmpq(*float(v).as_integer_ratio()) for v in x]
    r = [flint.fmpq(*float(v).as_integer_ratio()) for v in f]
    for i, j, v in zip(Kc.row, Kc.col, Kc.data):
        r[i] -= flint.fmpq(*float(v).as_integer_ratio()) * xq[j]
    rr = np.array([float(v) for v in r])
    d = spla.splu(sp.csc_array(K)).solve(rr)
    x_star = x + d
    return -math.log10(np.max(np.abs(d)) / np.max(np.abs(x_star)))


def _supported(report):
    assert not report.verdict.startswith(("singular", "not decided")), report.verdict
    assert not report.condition.singular
    assert report.restraints == []
    assert report.spectrum.support is not None and report.spectrum.support.outcome == "proved supported"
    assert not any(m.exact or m.undecided for m in report.spectrum.modes)
    for f in report.findings:
        assert "Add supports" not in f.advice and "add a support" not in f.advice.lower() and "no displacement" not in f.message, f


def test_clamped_slender_strip_is_supported_with_measured_digits():
    model = clamped_strip()
    K = sp.csr_array(model.K)
    S = scaled(K)
    w = np.linalg.eigvalsh(S.toarray())           # LAPACK
    n = K.shape[0]
    assert w[0] < n * EPS * w[-1]                  # the old rule called this zero
    lo, hi = bracket(S, w[0], bits=4000)           # python-flint ball inertia counts
    assert lo > 0
    report = diagnose(model, seed=1)
    _supported(report)
    # The tool's bound on lambda_min(S) is below the bracket's upper end (it is proved).
    assert 0 < report.spectrum.support.lower_bound_scaled < hi
    own = own_samples(report.digits)
    assert own, report.digits.skipped
    for s in own:
        truth = true_digits(K, s.solution, s.load_vector)
        assert abs(s.trustworthy_digits - truth) <= 0.5, (s.sample, s.trustworthy_digits, truth)
        assert s.trustworthy_digits > 1.0


def test_long_clamped_cantilever_is_supported():
    model = clamped_cantilever(1000)
    K = sp.csr_array(model.K)
    S = scaled(K)
    lam = float(spla.eigsh(S, k=1, sigma=0, which="LM")[0][0])   # ARPACK, shift-invert
    lo, _ = bracket(S, lam, bits=8000)
    assert lo > 0 and lam < K.shape[0] * EPS * 2.7
    report = diagnose(model, seed=2)
    _supported(report)
    own = own_samples(report.digits)
    assert own, report.digits.skipped
    for s in own[:2]:
        truth = true_digits(K, s.solution, s.load_vector)
        assert abs(s.trustworthy_digits - truth) <= 0.5, (s.sample, s.trustworthy_digits, truth)


@pytest.mark.parametrize("ref", [fr.free_plate(nx=8, ny=4), fr.solid_block(6, 3, 3), fr.two_blocks()],
                         ids=["plate", "block", "two-blocks"])
def test_free_fem_models_are_still_singular(ref):
    """Free scikit-fem plates and solids: 3 rigid-body modes per plate, 6 per solid (textbook)."""
    report = diagnose(Model(ref.K, dofs=ref.dofs, coords=ref.coords), measure=False)
    count = ref.rigid_body_modes
    assert report.verdict.startswith(f"singular: {count} free modes"), report.verdict
    assert report.spectrum.support.outcome == "zero at working precision"
    assert report.restraints


def test_free_truss_is_still_singular():
    """An unsupported triangle of bars: 3 rigid-body modes in the plane (textbook)."""
    a = truss2d([1, 2, 3], [[0.0, 0.0], [1000.0, 0.0], [500.0, 800.0]], [[1, 2], [2, 3], [3, 1]],
                E=210000.0, A=100.0)
    xyz = np.array([[0.0, 0.0, 0.0], [1000.0, 0.0, 0.0], [500.0, 800.0, 0.0]])
    report = diagnose(Model(a.K, dofs=a.dofs, coords=Coordinates(np.array([1, 2, 3]), xyz, 2)), measure=False)
    assert report.verdict.startswith("singular: 3 free modes"), report.verdict


def test_cantilever_without_a_proof_is_not_decided(monkeypatch):
    """3,000 beam elements: lambda_min(S) about 10 eps lambda_max (ARPACK), far above the
    stored K's resolution u max row sum |S|, but with the 192-bit proof switched off the
    float64 bound cannot prove it: not decided, no confident support advice, digits measured."""
    import conditioning.stages.support_proof as sp_mod

    monkeypatch.setattr(sp_mod, "LDL_MAX_FLOPS", 0.0)
    model = clamped_cantilever(3000, length=30000.0)
    report = diagnose(model, seed=3)
    assert report.verdict.startswith("not decided"), report.verdict
    support = report.spectrum.support
    assert support.outcome == "not decided"
    assert min(support.eigenvalues) > 10 * support.resolution + max(support.error_bounds)
    assert not report.condition.singular
    assert all(r.reason.startswith("only if the mode is free") for r in report.restraints)
    for f in report.findings:
        if f.code.startswith("support."):
            assert f.severity == "warning" and f.advice.startswith("If the mode is free"), f
    assert own_samples(report.digits), report.digits.skipped


def test_proved_supported_without_a_gap_has_no_modes():
    """A long clamped cantilever's smallest eigenvalues are graded (LAPACK: no ratio of
    1e3 between neighbours), so once positive definiteness is proved nothing is a
    'nearly free mode' or a 'mechanism': the model is ill-conditioned, and no action
    sends the engineer to the node where the elimination met the smallest pivot."""
    from conditioning.render.terminal import render_text
    from conditioning.stages.spectrum import MIN_GAP

    model = clamped_cantilever(1000)
    w = np.linalg.eigvalsh(scaled(sp.csr_array(model.K)).toarray())     # LAPACK syevd
    assert np.max(w[1:13] / w[:12]) < MIN_GAP                              # no spectral gap
    report = diagnose(model, seed=1)
    _supported(report)
    assert report.spectrum.modes == [] and report.spectrum.count == 0
    assert report.verdict.startswith("ill-conditioned"), report.verdict
    assert not [f for f in report.findings if f.code.startswith("support.")]
    text = render_text(report, width=80)
    actions = text.split("What to do", 1)[1].split("Key figures", 1)[0]
    assert "nearly unsupported" not in actions and "mechanism" not in actions, actions
