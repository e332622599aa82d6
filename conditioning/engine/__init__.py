"""The factorization every later stage shares, and what it costs.

:mod:`conditioning.engine.base` defines what the stages need from a sparse
direct solver (the ``Engine`` and ``Factorization`` protocols and the shift
policy); :mod:`conditioning.engine.scaling` builds the scaled stiffness
S = D^-1/2 K D^-1/2 they all work on; :mod:`conditioning.engine.scipy_engine`
is the SuperLU engine with the project's orderings
(:mod:`conditioning.engine.ordering`) and memory prediction
(:mod:`conditioning.engine.memory`); :mod:`conditioning.engine.petsc_engine`
is MUMPS and SLEPc under MPI (optional: petsc4py and slepc4py, see
scripts/setup-petsc-engine.sh). :func:`engine_named` makes either from its name.
"""

#: Names of the engines :func:`engine_named` makes, the default first.
ENGINES = ("scipy", "petsc")


def engine_named(name: str, **options):
    """The engine called ``name`` (:data:`ENGINES`), made with ``options``.

    Returns
    -------
    conditioning.engine.base.Engine
        :class:`~conditioning.engine.scipy_engine.ScipyEngine` for "scipy"
        (``options``: its ``ordering``), :class:`~conditioning.engine.petsc_engine.PetscEngine`
        for "petsc" (imported only then; raises ImportError with how to get
        petsc4py when it is missing).
    """
    if name == "scipy":
        from conditioning.engine.scipy_engine import ScipyEngine

        return ScipyEngine(**options)
    if name == "petsc":
        from conditioning.engine.petsc_engine import PetscEngine

        return PetscEngine()
    raise ValueError(f"engine {name!r}: expected one of {ENGINES}")
