"""Factor-size prediction before factorizing, checked against the factors
LAPACK (numpy.linalg.cholesky) and SuperLU (scipy.sparse.linalg.splu)
actually produce."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from hypothesis import given, settings
from hypothesis import strategies as st

from conditioning.engine.memory import (
    cholesky_column_counts,
    fits,
    memory_limit,
    parse_size,
    predict_factor_memory,
)
from conditioning.engine.ordering import nested_dissection
from conditioning.engine.base import FactorMemoryPrediction

from test_ordering import skfem_elasticity, superlu_fill


def random_spd(n, density, seed, dofs_per_node=1):
    """Random SPD matrix: a random symmetric pattern (Kronecker-expanded to
    dofs_per_node), values making it strictly diagonally dominant."""
    rng = np.random.default_rng(seed)
    P = sp.random_array((n, n), density=density, rng=rng, format="csr")
    P = sp.csr_array(sp.kron(P + P.T, np.ones((dofs_per_node, dofs_per_node))))
    P.data = rng.uniform(-1.0, 1.0, P.data.size)
    P = sp.csr_array(P + P.T)
    d = np.abs(P).sum(axis=1) + 1.0
    return sp.csr_array(P + sp.diags_array(d))


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 40), density=st.floats(0.0, 0.25), seed=st.integers(0, 2**16),
       dpn=st.sampled_from([1, 2, 3]), shuffle=st.booleans())
def test_column_counts_match_lapack_cholesky(n, density, seed, dpn, shuffle):
    """Column counts of L from the pattern alone equal the nonzeros of the
    numerical Cholesky factor from LAPACK (random values: no cancellation)."""
    K = random_spd(n, density, seed, dpn)
    N = K.shape[0]
    perm = np.random.default_rng(seed).permutation(N) if shuffle else np.arange(N)
    counts, weights = cholesky_column_counts(K, perm)
    L = np.linalg.cholesky(K[perm][:, perm].toarray())
    per_column = np.count_nonzero(np.abs(L) > 0, axis=0)
    # First DOF column of each supernode carries the supernode's count.
    starts = np.r_[0, np.cumsum(weights)[:-1]]
    np.testing.assert_array_equal(per_column[starts], counts)
    assert weights.sum() == N


@pytest.mark.parametrize("dim,n", [(2, 40), (3, 8)])
def test_predicted_fill_matches_superlu(dim, n):
    """Predicted L + U entries within 3% of what SuperLU stores (its relaxed
    supernodes add a little explicit-zero padding) for the nested-dissection
    and the natural ordering."""
    K, xyz = skfem_elasticity(n, dim)
    for perm in (nested_dissection(K, xyz), np.arange(K.shape[0])):
        pred = predict_factor_memory(K, perm)
        actual = superlu_fill(K, perm)
        assert abs(pred.factor_entries / actual - 1) < 0.03
        assert pred.bytes > 8 * actual  # at least the values themselves


def test_proxy_prediction_without_ordering():
    """Without a permutation (SuperLU picks its own), the nested-dissection
    proxy is within its stated accuracy of MMD(A'+A)'s real fill."""
    K, xyz = skfem_elasticity(40, 2)
    pred = predict_factor_memory(K, None, coords=xyz)
    actual = superlu_fill(K, spec="MMD_AT_PLUS_A")
    assert "proxy" in pred.method
    assert abs(pred.factor_entries / actual - 1) < pred.confidence


def test_parse_size():
    """Binary multiples (common practice: 1 G = 2^30 bytes)."""
    assert parse_size("2G") == 2 * 2**30
    assert parse_size("512M") == 512 * 2**20
    assert parse_size("1.5k") == 1536
    assert parse_size("1000") == 1000
    with pytest.raises(ValueError):
        parse_size("lots")


def test_limit_from_environment_and_meminfo(monkeypatch):
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "3M")
    assert memory_limit() == 3 * 2**20
    monkeypatch.delenv("CONDITIONING_MEMORY_LIMIT")
    with open("/proc/meminfo") as fh:
        avail = next(int(line.split()[1]) * 1024 for line in fh if line.startswith("MemAvailable:"))
    assert 0.3 * avail < memory_limit() <= avail


def test_memory_guard_small_limit(monkeypatch):
    """A 3D model whose factor needs tens of MB does not fit under a 4 MB
    limit, and the check runs before any factorization."""
    K, xyz = skfem_elasticity(12, 3)  # 6,084 rows
    calls = []
    monkeypatch.setattr(spla, "splu", lambda *a, **k: calls.append(1))
    pred = predict_factor_memory(K, nested_dissection(K, xyz))
    assert isinstance(pred, FactorMemoryPrediction)
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "4M")
    assert not fits(pred)
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "4G")
    assert fits(pred)
    assert fits(pred, limit_bytes=pred.bytes) and not fits(pred, limit_bytes=pred.bytes - 1)
    assert calls == []


def test_plan_reuses_the_ordering_and_guards_memory(monkeypatch):
    """plan_factorization: nested dissection for a 3D model with positions
    (the documented rule), its permutation handed to the shared
    factorization unchanged, and the prediction within 3% of the fill
    SuperLU then reports."""
    from conditioning.engine.scipy_engine import factorize
    from conditioning.engine.memory import plan_factorization

    K, xyz = skfem_elasticity(12, 3)  # 6,084 rows
    monkeypatch.setenv("CONDITIONING_MEMORY_LIMIT", "64k")
    plan = plan_factorization(K, xyz)
    assert not plan.fits and plan.limit_bytes == 64 * 1024
    monkeypatch.delenv("CONDITIONING_MEMORY_LIMIT")
    plan = plan_factorization(K, xyz)
    assert plan.fits and callable(plan.ordering)
    assert plan.ordering.ordering_name == "nested-dissection"
    fac = factorize(K, ordering=plan.ordering, coords=xyz)
    assert fac.info.ordering == "nested-dissection"
    assert abs(plan.prediction.factor_entries / fac.info.fill - 1) < 0.03
