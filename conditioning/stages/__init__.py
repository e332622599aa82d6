"""The stages of the diagnosis, in pipeline order: structure, spectrum,
modes, restraints, condition, jumps, pivots, digits, findings. Each takes the
model (and earlier results) and returns a frozen result of
:mod:`conditioning.results`."""
