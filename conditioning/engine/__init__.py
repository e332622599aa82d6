"""The factorization every later stage shares, and what it costs.

The scipy engine (SuperLU with the project's own orderings) lives in
:mod:`conditioning.engine.scipy_engine`; memory prediction and orderings
beside it.
"""
