"""Internals of the discrete-event simulator; the public entry point is
:func:`commitadvisor.simulate.simulate_case`.

Modules: ``params`` (the case turned into per-regime numbers and a regime schedule),
``engine`` (sample pools, device stalls, the vectorised log writer, the per-commit ring),
``record`` (histograms, at-risk probes, per-window series), ``lanes`` (the two event loops:
open arrivals and closed sessions), ``assemble`` (figures into result objects).
"""
