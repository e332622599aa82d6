"""A regular DOF map named by its DOFs (``--dof-names``): a 2D frame is ux, uy, rz.

Outside reference: the zero-energy modes of an unsupported plane frame are 3 rigid-body
motions, two translations and the in-plane rotation (textbook fact, common practice;
REFERENCES.md), checked here also against LAPACK's null space of K
(scipy.linalg.null_space). The frame is invented for the test and assembled with the
project's demo frame element.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.io
import scipy.linalg as sla

import conditioning
from conditioning.cli import main
from conditioning.demo.assemble import frame2d
from conditioning.errors import InputError
from conditioning.io.load import load_model


def free_frame():
    """A free portal frame, nodes 1..9 (columns 1-3 and 7-9, beam 3-7), mm and MPa."""
    xy = np.array([[0, 0], [0, 1500], [0, 3000], [1500, 3000], [3000, 3000], [4500, 3000],
                   [6000, 3000], [6000, 1500], [6000, 0]], dtype=float)
    nodes = np.arange(1, 10)
    members = np.array([[1, 2], [2, 3], [3, 4], [4, 5], [5, 6], [6, 7], [7, 8], [8, 9]])
    asm = frame2d(nodes, xy, members, E=210000.0, A=5000.0, I=8.0e7)
    assert [str(asm.dofs.dof_name(r)) for r in range(3)] == ["ux", "uy", "rz"]  # row order per node
    coords = {int(v): tuple(p) for v, p in zip(nodes, xy)}
    return asm.K, coords


def test_named_regular_map_finds_the_in_plane_rotation():
    K, coords = free_frame()
    assert sla.null_space(K.toarray(), rcond=1e-10).shape[1] == 3          # LAPACK
    named = conditioning.diagnose(load_model(K, dofs_per_node=("ux", "uy", "rz"), coords=coords),
                                  measure=False)
    kinds = [m.kind for m in named.spectrum.modes]
    assert kinds == ["rigid-body"] * 3
    motions = sorted(max(m.motion, key=m.motion.get) for m in named.spectrum.modes)
    assert motions == ["rz", "ux", "uy"]
    assert named.summary.dof_types == ["ux", "uy", "rz"]
    # --dofs-per-node 3 would label the rotation rows uz (the reason for the option).
    as_uz = conditioning.diagnose(load_model(K, dofs_per_node=3, coords=coords), measure=False)
    assert as_uz.summary.dof_types == ["ux", "uy", "uz"]


def test_cli_option_and_its_errors(tmp_path, capsys):
    K, coords = free_frame()
    path = tmp_path / "frame.mtx"
    scipy.io.mmwrite(str(path), K, symmetry="symmetric")
    xy = tmp_path / "coords.csv"
    xy.write_text("node,x,y\n" + "".join(f"{v},{p[0]},{p[1]}\n" for v, p in coords.items()))
    out = tmp_path / "r.json"
    assert main(["diagnose", str(path), "--dof-names", "ux,uy,rz", "--coords", str(xy),
                 "--json", str(out), "--quiet"]) == 3
    assert "3 free modes (3 rigid-body)" in capsys.readouterr().out
    with pytest.raises(InputError, match="DOF names must be among"):
        load_model(K, dofs_per_node=("ux", "uy", "theta"))
    with pytest.raises(InputError, match="not a multiple of 2"):
        load_model(K[:27, :27], dofs_per_node=("ux", "uy"))
    assert main(["diagnose", str(path), "--dof-names", "ux,uy,w"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "DOF names must be among" in err
