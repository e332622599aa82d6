"""conditioning: can the stiffness matrix of a finite element model be trusted?

Public API::

    model = conditioning.load_model("deck.mtx", dofs="deck_dofs.csv", coords=...)
    report = conditioning.diagnose(model)

See README.md for the command line.
"""

from conditioning.errors import ConditioningError, InputError

__version__ = "0.1.0"

#: Names served from :mod:`conditioning.model` on first use (PEP 562), so that
#: reading a report back and rendering it does not import the model (nor
#: scipy) through this package.
_FROM_MODEL = ("Model", "DofTable", "Coordinates", "DOF_NAMES")

__all__ = [
    "ConditioningError",
    "InputError",
    "Model",
    "DofTable",
    "Coordinates",
    "DOF_NAMES",
    "load_model",
    "diagnose",
]


def load_model(*args, **kwargs):
    """Read a stiffness export and its context; see :func:`conditioning.io.load.load_model`."""
    from conditioning.io.load import load_model as _load_model

    return _load_model(*args, **kwargs)


def diagnose(*args, **kwargs):
    """Run the whole diagnosis; see :func:`conditioning.pipeline.diagnose`."""
    from conditioning.pipeline import diagnose as _diagnose

    return _diagnose(*args, **kwargs)


def __getattr__(name: str):
    if name in _FROM_MODEL:
        from conditioning import model

        return getattr(model, name)
    raise AttributeError(f"module 'conditioning' has no attribute {name!r}")
