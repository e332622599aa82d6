"""Springs to ground only when grounded: a stiff region is not a support.

Outside references: the stiffness is assembled by scikit-fem (tests/fe_reference.py), an
independent assembler: a clamped plane-stress plate with a block of elements E x 3000 stiffer.
The fact checked is a textbook one: an element's forces balance under a rigid motion, so
K times a rigid translation or rotation vanishes in every row that no spring to ground or
support holds (Cook, Malkus, Plesha, Witt, Concepts and Applications of FEA, 2002, on rigid-body
modes of element matrices, from memory); checked here with numpy on scikit-fem's K. The
block's nodes are those of the stiff elements, by construction.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import skfem
from skfem.models.elasticity import linear_elasticity, plane_stress

import conditioning
from conditioning.model import Model
from conditioning.render.terminal import render_text
from fe_reference import _from_basis

FACTOR = 3.0e3


def _plate_with_stiff_block():
    mesh = skfem.MeshQuad.init_tensor(np.linspace(0.0, 4000.0, 17), np.linspace(0.0, 2500.0, 11))
    element = skfem.ElementVector(skfem.ElementQuad1())
    centres = mesh.p[:, mesh.t].mean(axis=1)
    block = np.flatnonzero((abs(centres[0] - 2000.0) < 400.0) & (abs(centres[1] - 1250.0) < 400.0))
    form = linear_elasticity(*plane_stress(30000.0, 0.2))
    basis = skfem.Basis(mesh, element, intorder=3)
    K = 200.0 * form.assemble(basis)
    K = K + 200.0 * (FACTOR - 1.0) * form.assemble(skfem.Basis(mesh, element, intorder=3, elements=block))
    ref = _from_basis(basis, K, 2)
    keep = np.flatnonzero(ref.coords.xyz[ref.dofs.node - 1, 0] > 0.0)   # clamp the edge x = 0
    block_nodes = sorted({int(v) + 1 for v in np.unique(mesh.t[:, block])})
    return ref, keep, block_nodes


def _model(ref, keep, K=None):
    K = ref.K if K is None else K
    return Model(K=sp.csr_array(K[keep][:, keep]), dofs=ref.dofs.take(keep), coords=ref.coords,
                 source="plate with a stiff block")


def test_stiff_block_is_a_stiff_region_not_springs_to_ground():
    ref, keep, block_nodes = _plate_with_stiff_block()
    model = _model(ref, keep)
    # Outside check: the free K (before the clamp) times rigid translations is round-off in every row.
    free = ref.K
    for c in range(2):
        t = (ref.dofs.dof == c).astype(float)
        assert np.max(np.abs(free @ t)) <= 1e-12 * np.max(np.abs(free.data))
    report = conditioning.diagnose(model, seed=1)
    kinds = [j.kind for j in report.jumps]
    assert "diagonal-outlier" not in kinds
    assert not any(f.code == "stiffness.spring-to-ground" for f in report.findings)
    regions = [j for j in report.jumps if j.kind == "stiff-region"]
    assert len(regions) == 1
    assert set(regions[0].nodes) <= set(block_nodes) and len(regions[0].nodes) >= len(block_nodes) // 2
    assert any(f.code == "stiffness.stiff-region" for f in report.findings)
    figures = render_text(report, width=120).split("Key figures")[1].split("Model")[0]
    assert "springs to ground" not in figures and "stiff regions" in figures


def test_penalty_support_is_still_a_spring_to_ground():
    """The same plate with a support given by a large number (1e6 times the diagonal) at one node:
    grounded (K times a translation is the spring there), reported as a spring to ground."""
    ref, keep, _ = _plate_with_stiff_block()
    K = sp.lil_array(ref.K)
    node = int(np.flatnonzero((ref.coords.xyz[:, 0] == 4000.0) & (ref.coords.xyz[:, 1] == 1250.0))[0]) + 1
    for c in range(2):
        r = int(np.flatnonzero((ref.dofs.node == node) & (ref.dofs.dof == c))[0])
        K[r, r] += 1e6 * K[r, r]
    report = conditioning.diagnose(_model(ref, keep, sp.csr_array(K)), seed=1)
    grounded = [j for j in report.jumps if j.kind == "diagonal-outlier"]
    assert [j.nodes for j in grounded] == [[node]]
