"""Shared test fixtures.

External check data lives in ../shared/reference-matrices next to the
repository (see its PROVENANCE.md); tests that need it skip when it is absent.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import pytest
from hypothesis import settings

# CI draws the same examples on every run (a landing must not hang on a new
# random draw); locally each run draws new ones, to keep finding cases.
settings.register_profile("ci", derandomize=True, database=None)
if os.environ.get("CONDITIONING_CI"):
    settings.load_profile("ci")

REPO = Path(__file__).resolve().parents[1]
SHARED = Path(os.environ.get("CONDITIONING_SHARED", REPO.parent / "shared"))
REFERENCE_MATRICES = SHARED / "reference-matrices"


def reference_matrix_path(name: str) -> Path:
    """Path of a public reference matrix, or skip the test when absent."""
    if not REFERENCE_MATRICES.is_dir():
        pytest.skip(f"external check data not found at {REFERENCE_MATRICES} (../shared is absent)")
    for candidate in (REFERENCE_MATRICES / name, REFERENCE_MATRICES / f"{name}.mtx",
                      REFERENCE_MATRICES / f"{name}.mtx.gz"):
        if candidate.is_file():
            return candidate
    pytest.skip(f"reference matrix {name} not in {REFERENCE_MATRICES}")


def computed_stats() -> list[dict[str, str]]:
    """Rows of computed_stats.csv (published and LAPACK-computed figures), or skip."""
    path = REFERENCE_MATRICES / "computed_stats.csv"
    if not path.is_file():
        pytest.skip(f"external check data not found at {path} (../shared is absent)")
    with path.open(newline="") as fh:
        return list(csv.DictReader(fh))
