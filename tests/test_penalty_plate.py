"""A plate with a penalty link: the penalty's own soft direction is not a mode.

Diagonal scaling does not remove a penalty's soft direction: the scaled matrix
S = D^-1/2 K D^-1/2 gets a small eigenvalue whose eigenvector lives on the linked
DOFs (LAPACK's eigenvectors of S, numpy.linalg.eigh, are the truth for where its
energy is). It must be reported as a stiffness jump at those nodes, never as a
rigid-body mode or a mechanism, and no restraint may be suggested for it.

Model (invented): a 12 x 6 plate of plane-stress quadrilaterals (demo assembler,
mm and MPa), clamped on x = 0, with nodes 45 and 59 (diagonal neighbours across an
element) tied in ux by a penalty spring of 1e8 or 1e12 times an element's
axial stiffness E t.
"""

from __future__ import annotations

import numpy as np
import pytest

import conditioning
from conditioning.demo.assemble import apply_restraints, plane_stress_quad, spring
from conditioning.model import Coordinates, Model

NX, NY = 12, 6
E, T = 70000.0, 5.0
A, B = 45, 59


def tied_plate(factor: float) -> Model:
    ids = np.arange(1, (NX + 1) * (NY + 1) + 1).reshape(NY + 1, NX + 1)
    x, y = np.meshgrid(np.arange(NX + 1) * 50.0, np.arange(NY + 1) * 50.0)
    quads = np.array([[ids[j, i], ids[j, i + 1], ids[j + 1, i + 1], ids[j + 1, i]]
                      for j in range(NY) for i in range(NX)])
    asm = plane_stress_quad(ids.ravel(), np.c_[x.ravel(), y.ravel()], quads, E=E, nu=0.3, t=T)
    asm = spring(asm, (A, "ux"), (B, "ux"), factor * E * T)
    asm = apply_restraints(asm, [(int(v), d) for v in ids[:, 0] for d in ("ux", "uy")])
    coords = Coordinates(node=ids.ravel().astype(np.int64),
                         xyz=np.c_[x.ravel(), y.ravel(), np.zeros(ids.size)], dim=2)
    return Model(asm.K, dofs=asm.dofs, coords=coords)


@pytest.mark.parametrize("factor", [1e8, 1e12])
def test_penalty_soft_direction_is_a_jump_not_a_mode(factor):
    model = tied_plate(factor)
    d = 1 / np.sqrt(model.K.diagonal())
    w, V = np.linalg.eigh(model.K.toarray() * d[:, None] * d[None, :])        # LAPACK syevd
    energy = V[:, 0] ** 2
    linked = np.isin(model.dofs.node, [A, B])
    assert energy[linked].sum() >= 0.8                 # the soft direction lives on the link
    assert w[0] / w[-1] < 1e-6                         # and is small: the case of the issue
    report = conditioning.diagnose(model, measure=False)
    assert not any(m.kind in ("rigid-body", "mechanism") for m in report.spectrum.modes)
    assert report.restraints == []
    jumps = [j for j in report.jumps if set(j.nodes) >= {A, B}]
    assert jumps, [j.nodes for j in report.jumps]
    assert not report.verdict.startswith(("singular", "near-singular"))
