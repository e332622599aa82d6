"""Reports built by hand for the renderer tests (no test functions here).

The renderers only read a :class:`conditioning.results.Report`; these
fixtures let their tests run without the diagnosis stages (only the model's
geometry is restated, by :func:`conditioning.stages.geometry.model_geometry`). The model is a
small, invented 2D pin-jointed truss assembled here with the textbook bar
stiffness k = EA/L [c^2 cs; cs s^2] (common practice), and the numbers put in
the reports are computed from it with numpy's LAPACK eigensolver, so the
modes the renderers draw are real null vectors of the matrix.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp

from conditioning import results
from conditioning.model import Coordinates, DofTable, Model
from conditioning.stages.geometry import model_geometry


def truss_model(supported: bool = False) -> Model:
    """A 5 x 2 node Pratt-like truss, 10 nodes, ux/uy per node (invented).

    Unsupported it has the 3 rigid-body modes of a free plane body; with
    ``supported`` a pin at node 1 and a roller (uy) at node 5 are added as
    stiff springs of the same order as the bars.
    """
    nx, ny, dx, dy = 5, 2, 2.0, 1.5
    xy = np.array([(i * dx, j * dy) for j in range(ny) for i in range(nx)])
    nid = lambda i, j: j * nx + i  # noqa: E731
    bars = [(nid(i, j), nid(i + 1, j)) for j in range(ny) for i in range(nx - 1)]
    bars += [(nid(i, 0), nid(i, 1)) for i in range(nx)]
    bars += [(nid(i, 0), nid(i + 1, 1)) for i in range(nx - 1)]
    n = 2 * len(xy)
    K = np.zeros((n, n))
    EA = 2.1e5 * 1e-3
    for a, b in bars:
        d = xy[b] - xy[a]
        L = math.hypot(*d)
        c, s = d / L
        k = EA / L * np.array([[c * c, c * s], [c * s, s * s]])
        for (p, q, sign) in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
            K[2 * p:2 * p + 2, 2 * q:2 * q + 2] += sign * k
    if supported:
        for row in (0, 1, 2 * (nx - 1) + 1):
            K[row, row] += EA / dx
    node = np.repeat(np.arange(1, len(xy) + 1), 2).astype(np.int64)
    dof = np.tile(np.array([0, 1], dtype=np.int8), len(xy))
    coords = Coordinates(np.arange(1, len(xy) + 1, dtype=np.int64),
                         np.column_stack([xy, np.zeros(len(xy))]), 2)
    load = np.zeros(n)
    load[2 * nid(2, 1) + 1] = -10.0
    return Model(K=sp.csr_array(K), source="truss.mtx", dofs=DofTable(node, dof),
                 coords=coords, load=load)


def _structure(model: Model) -> results.StructureResult:
    n = model.n
    return results.StructureResult(
        n=n, stored_entries=int(model.K.nnz), empty_rows=np.array([], dtype=np.intp),
        zero_diagonal=np.array([], dtype=np.intp), negative_diagonal=np.array([], dtype=np.intp),
        asymmetry=results.Asymmetry(0.0, -1, -1), part_of_row=np.zeros(n, dtype=np.intp),
        part_sizes=np.array([n], dtype=np.intp), parts=1)


def _summary(model: Model) -> results.ModelSummary:
    return results.ModelSummary(
        source=model.source, rows=model.n, stored_entries=int(model.K.nnz), nodes=10, dim=2,
        dof_types=["ux", "uy"], has_load=True, has_solution=False, restrained=0,
        notes=["invented test truss"])


def _scaled_eigh(model: Model):
    K = model.K.toarray()
    d = 1 / np.sqrt(np.diag(K))
    S = d[:, None] * K * d[None, :]
    w, V = np.linalg.eigh(S)
    return d, w, V


def singular_report(many_nodes: int = 0) -> tuple[results.Report, Model]:
    """Unsupported truss: 3 rigid-body modes; with ``many_nodes`` the first
    mode claims that many extra nodes (to exercise list summaries)."""
    model = truss_model(supported=False)
    d, w, V = _scaled_eigh(model)
    modes = []
    motions = [{"ux": 0.8, "uy": 0.15, "rz": 0.05}, {"ux": 0.1, "uy": 0.9, "rz": 0.0},
               {"ux": 0.0, "uy": 0.02, "rz": 0.98}]
    for k in range(3):
        u = d * V[:, k]
        u /= np.abs(u).max()
        nodes = list(range(1, 11)) + (list(range(11, 11 + many_nodes)) if k == 0 else [])
        modes.append(results.NearSingularMode(
            eigenvalue=float(w[k]), relative_eigenvalue=float(w[k] / w[-1]), kind="rigid-body",
            motion=motions[k], nodes=nodes, part=0, rigid_share=1.0, vector=u))
    spectrum = results.SpectrumResult(
        smallest=w[:6].copy(), count=3, gap=float(w[3] / max(abs(w[2]), 1e-300)),
        gap_rule="largest ratio of consecutive eigenvalues below 1e-8", inertia_count=3,
        inertia_agrees=True, negative_eigenvalues=0, modes=modes,
        method="dense eigh (test fixture)")
    condition = results.ConditionResult(
        singular=True, lambda_max=float(np.linalg.eigvalsh(model.K.toarray())[-1]),
        lambda_min=None, estimate=None, estimate_method="Lanczos and shift-and-invert",
        scaled_estimate=None, scaled_lambda_min=None, scaled_lambda_max=float(w[-1]),
        scaled_method="Lanczos on the scaled matrix", one_norm_estimate=None,
        one_norm_method="Hager-Higham 1-norm estimate (a lower bound)",
        scaling_gain_digits=None)
    restraints = [results.Restraint(1, "ux", 0, "fixes translation along x"),
                  results.Restraint(1, "uy", 1, "fixes translation along y"),
                  results.Restraint(5, "uy", 9, "fixes rotation about z")]
    findings = [results.Finding("error", "free-modes", "3 rigid-body modes: the part can move "
                                "freely", list(range(1, 11)),
                                "Restrain node 1 ux, uy and node 5 uy, if such supports exist.")]
    report = results.Report(
        summary=_summary(model), structure=_structure(model), factorization=None,
        condition=condition, spectrum=spectrum, restraints=restraints, jumps=[], pivots=None,
        digits=None, findings=findings, verdict="singular: 3 free modes", status="errors",
        timings={"structure": 0.001}, geometry=model_geometry(model))
    return report, model


def healthy_report(digits: float = 12.5) -> tuple[results.Report, Model]:
    """Supported truss, measured-looking digits (values set by hand) and one
    diagonal-outlier jump, so every section has content."""
    model = truss_model(supported=True)
    K = model.K.toarray()
    lam = np.linalg.eigvalsh(K)
    d, w, _ = _scaled_eigh(model)
    kappa = float(lam[-1] / lam[0])
    condition = results.ConditionResult(
        singular=False, lambda_max=float(lam[-1]), lambda_min=float(lam[0]), estimate=kappa,
        estimate_method="Lanczos for lambda_max, shift-and-invert for lambda_min",
        scaled_estimate=float(w[-1] / w[0]), scaled_lambda_min=float(w[0]),
        scaled_lambda_max=float(w[-1]), scaled_method="Lanczos on the scaled matrix",
        one_norm_estimate=float(np.linalg.cond(K, 1)),
        one_norm_method="Hager-Higham 1-norm estimate (a lower bound)",
        scaling_gain_digits=float(math.log10(kappa / (w[-1] / w[0]))))
    spectrum = results.SpectrumResult(
        smallest=w[:6].copy(), count=0, gap=None, gap_rule="no eigenvalue below 1e-8",
        inertia_count=0, inertia_agrees=True, negative_eigenvalues=0, modes=[],
        method="dense eigh (test fixture)")
    per_dof = np.full(model.n, digits + 1.0)
    per_dof[7] = digits
    per_dof[8] = math.nan
    samples = [
        results.DigitsSample(
            sample=name, trustworthy_digits=digits + off, digits_lost=15.95 - digits - off,
            method="double-double refinement", converged=True, stop_reason="correction stalled",
            history=[results.RefinementStep(1, 1e-13, 1e-17), results.RefinementStep(2, 1e-30,
                                                                                     1e-33)],
            worst_nodes=[results.NodeDigits(4, digits), results.NodeDigits(5, digits + 0.3)],
            normwise_bound=1e-30, componentwise_bound=math.inf if name == "worst-case" else 1e-29,
            bound_trusted=name != "worst-case", per_dof_digits=per_dof)
        for name, off in (("load", 0.0), ("random-1", 0.4), ("worst-case", -1.0))]
    digits_result = results.DigitsResult(
        samples=samples, predicted_raw=15.95 - math.log10(kappa), predicted_scaled=14.0,
        factorization_flops=1.2e4, summary="the scaled prediction was closer", skipped=None)
    jump = results.StiffnessJump(kind="diagonal-outlier", rows=[0], nodes=[1], ratio=1e9,
                                 digits_cost=9.0, advice_value=1e6,
                                 reasoning="1e3 times the neighbours keeps the support rigid")
    findings = [results.Finding("warning", "stiff-spring", "a stiff spring at node 1", [1],
                                "Use about 1e6 instead.")]
    report = results.Report(
        summary=_summary(model), structure=_structure(model),
        factorization=results.FactorizationInfo("MMD_AT_PLUS_A", 0.0, 0, 120, 1.2e4, 0.001, True),
        condition=condition, spectrum=spectrum, restraints=[], jumps=[jump],
        pivots=results.PivotLoss([results.PivotEntry(7, "node 4 uy", 1e-3, 3.0)], 3.0,
                                    "K_ii / D_ii from the shared factorization"),
        digits=digits_result, findings=findings, verdict=f"trustworthy to {digits:.0f} digits",
        status="warnings", timings={"structure": 0.001, "digits": 0.01},
        geometry=model_geometry(model))
    return report, model
