"""The factorization every later stage shares, and what it costs.

:mod:`conditioning.engine.base` defines what the stages need from a sparse
direct solver (the ``Engine`` and ``Factorization`` protocols and the shift
policy); :mod:`conditioning.engine.scaling` builds the scaled stiffness
S = D^-1/2 K D^-1/2 they all work on; :mod:`conditioning.engine.scipy_engine`
is the SuperLU engine with the project's orderings
(:mod:`conditioning.engine.ordering`) and memory prediction
(:mod:`conditioning.engine.memory`). A PETSc engine joins here (issue 13).
"""
