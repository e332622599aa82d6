"""The vectorised reader of large regular CSV files agrees with the
line-by-line reader (which stays the reference and the source of error
messages) on the same content."""

from __future__ import annotations

import numpy as np
import pytest

from conditioning.errors import InputError
from conditioning.io.load import _coordinates_from_csv, _csv_pairs, _dof_pairs_from_csv, _fast_table


def test_dof_map_fast_path_equals_line_by_line(tmp_path):
    p = tmp_path / "map.csv"
    p.write_text("node,dof\n" + "".join(f"{i // 3 + 1},{['ux', 'UY', ' rz'][i % 3]}\n" for i in range(300)))
    assert _fast_table(str(p), ("node", "dof")) is not None
    node, dof, lines, codes = _dof_pairs_from_csv(str(p))
    ref_node, ref_dof, ref_lines = _csv_pairs(str(p))
    assert np.array_equal(node, ref_node) and np.array_equal(dof, ref_dof) and list(lines) == ref_lines
    assert not codes


def test_dof_codes_seen_by_both_readers(tmp_path):
    """DOF codes 1-6 are noticed (and said in the notes) by the fast and the line-by-line reader alike."""
    fast, slow = tmp_path / "fast.csv", tmp_path / "slow.csv"
    fast.write_text("node,dof\n1,1\n1,2\n2,6\n")
    slow.write_text("node,dof\n# codes\n1,1\n1,2\n2,6\n")
    for p in (fast, slow):
        node, dof, _, codes = _dof_pairs_from_csv(str(p))
        assert codes and list(dof) == [0, 1, 5]


def test_coordinates_fast_path_equals_line_by_line(tmp_path):
    p = tmp_path / "xyz.csv"
    p.write_text("node,x,y,z\n1,0,0,0\n2, 1.5,2,-3e2\n7,1e-3,4,5\n")
    node, xyz, has_z, lines = _coordinates_from_csv(str(p))
    assert has_z and list(node) == [1, 2, 7] and lines == [2, 3, 4]
    assert np.array_equal(xyz[1], [1.5, 2.0, -300.0])


@pytest.mark.parametrize("text", [
    "node,dof\n1,ux\n# comment\n2,uy\n",        # comments: line-by-line reader
    "node,dof\n1,ux\n\n2,uy\n",                 # blank line
    'node,dof\n"1",ux\n2,uy\n',                 # quoting
    "1,ux\n2,uy\n",                             # no header
])
def test_irregular_files_take_the_line_by_line_reader(tmp_path, text):
    p = tmp_path / "map.csv"
    p.write_text(text)
    assert _fast_table(str(p), ("node", "dof")) is None
    node, dof, _, codes = _dof_pairs_from_csv(str(p))
    assert list(node) == [1, 2] and list(dof) == [0, 1] and not codes


def test_bad_cell_still_named_by_line(tmp_path):
    p = tmp_path / "map.csv"
    p.write_text("node,dof\n1,ux\n2,uq\n")
    with pytest.raises(InputError, match="line 3"):
        _dof_pairs_from_csv(str(p))


def test_extra_columns_and_any_order(tmp_path):
    """A map written as row,dof,node (columns found by name) reads the same."""
    p = tmp_path / "map.csv"
    p.write_text("row,dof,node\n1,ux,4\n2,uy,4\n3,rz,9\n")
    node, dof, lines, _ = _dof_pairs_from_csv(str(p))
    assert list(node) == [4, 4, 9] and list(dof) == [0, 1, 5] and lines == [2, 3, 4]
