"""The model's geometry in the report says what the model says.

:func:`conditioning.stages.geometry.model_geometry` restates the input for
the views. Checked on the bundled invented demo models against the model's
own DofTable and Coordinates, and the node pairs against a plain loop over
K's stored entries (an independent count of the element edges).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.sparse as sp

from conditioning.demo.scenarios import scenarios
from conditioning.model import Coordinates, DofTable, Model
from conditioning.pipeline import diagnose
from conditioning.render.modes_export import ExportError, write_modes_vtu
from conditioning.stages.geometry import MAX_EDGES, model_geometry
from test_report_fixtures import singular_report


@pytest.fixture(scope="module")
def cases():
    return scenarios()


def _edges_by_loop(model: Model) -> set[tuple[int, int]]:
    """Node-id pairs coupled by a stored entry of K, entry by entry."""
    coo = model.K.tocoo()
    pairs = set()
    for i, j in zip(coo.row.tolist(), coo.col.tolist()):
        a, b = int(model.dofs.node[i]), int(model.dofs.node[j])
        if a != b:
            pairs.add((min(a, b), max(a, b)))
    return pairs


@pytest.mark.parametrize("name", ["footbridge", "mast_missing_brace", "lattice_tower_3d",
                                  "monorail_no_torsion_support"])
def test_geometry_matches_the_model(cases, name):
    model = cases[name].model
    g = model_geometry(model)
    assert g.rows == model.n
    np.testing.assert_array_equal(g.diagonal, model.K.diagonal())
    np.testing.assert_array_equal(g.nodes, np.unique(model.dofs.node))
    np.testing.assert_array_equal(g.row_node, model.dofs.node)
    np.testing.assert_array_equal(g.row_dof, model.dofs.dof)
    np.testing.assert_array_equal(g.nodes[g.node_index()], model.dofs.node)
    assert g.dim == model.coords.dim
    for k, node in enumerate(g.nodes):
        at = np.flatnonzero(model.coords.node == node)[0]
        np.testing.assert_array_equal(g.xyz[k], model.coords.xyz[at])
    assert g.has_position().all()
    edges = {(int(g.nodes[a]), int(g.nodes[b])) for a, b in g.edges}
    assert len(edges) == len(g.edges)                     # each pair once
    assert all(a < b for a, b in g.edges)
    assert edges == _edges_by_loop(model)


def test_the_report_carries_the_whole_models_geometry(cases):
    """Every path of the diagnosis attaches it; the penalty path (the rest of K
    diagnosed with the swallowed rows held) describes the whole model."""
    for name in ("footbridge", "rack_penalty_tie"):
        model = cases[name].model
        report = diagnose(model, measure=False)
        want = model_geometry(model)
        assert report.geometry.rows == model.n == report.summary.rows
        for f in dataclasses.fields(want):
            a, b = getattr(report.geometry, f.name), getattr(want, f.name)
            np.testing.assert_array_equal(a, b, err_msg=f"{name}: {f.name}")


def test_without_map_or_coordinates():
    K = sp.csr_array(np.array([[2.0, -1.0], [-1.0, 2.0]]))
    g = model_geometry(Model(K=K))
    assert g.rows == 2 and g.nodes is None and g.row_node is None and g.edges is None
    np.testing.assert_array_equal(g.diagonal, [2.0, 2.0])
    mapped = model_geometry(Model(K=K, dofs=DofTable(np.array([4, 7]), np.array([0, 0], np.int8))))
    np.testing.assert_array_equal(mapped.nodes, [4, 7])
    np.testing.assert_array_equal(mapped.edges, [[0, 1]])
    assert mapped.xyz is None and mapped.dim is None and not mapped.has_position().any()


def test_a_node_without_position_is_nan_and_named_by_the_vtu_export(tmp_path):
    K = sp.csr_array(np.array([[2.0, -1.0], [-1.0, 2.0]]))
    model = Model(K=K, dofs=DofTable(np.array([4, 7]), np.array([0, 0], np.int8)),
                  coords=Coordinates(np.array([4]), np.array([[1.0, 2.0, 0.0]]), 2))
    g = model_geometry(model)
    np.testing.assert_array_equal(g.has_position(), [True, False])
    np.testing.assert_array_equal(g.xyz[0], [1.0, 2.0, 0.0])
    assert np.isnan(g.xyz[1]).all()
    report = dataclasses.replace(singular_report()[0], geometry=g)
    with pytest.raises(ExportError, match=r"no coordinates for 1 mapped nodes \(first: node 7\)"):
        write_modes_vtu(report, tmp_path / "m.vtu")


def test_too_many_pairs_gives_no_edges():
    """A path graph of MAX_EDGES + 1 links: only the nodes are drawn."""
    n = MAX_EDGES + 2
    K = sp.diags([-np.ones(n - 1), 2 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1], format="csr")
    model = Model(K=sp.csr_array(K), dofs=DofTable(np.arange(1, n + 1), np.zeros(n, np.int8)))
    assert model_geometry(model).edges is None
    short = Model(K=sp.csr_array(K[:n - 1, :n - 1]),
                  dofs=DofTable(np.arange(1, n), np.zeros(n - 1, np.int8)))
    assert len(model_geometry(short).edges) == MAX_EDGES
