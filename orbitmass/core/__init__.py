"""Pure numerics on plain floats, no I/O: Kepler's equation, element conversions,
Kepler III and derived physics, cosmological distances, sampler diagnostics, and
:mod:`orbitmass.core.orbit`, the one orbit evaluator every other part uses."""
