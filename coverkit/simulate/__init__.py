"""Discrete-event simulation of the response system: calls replayed (or drawn) through the fleet of units.

The travel times come from the engine's tables (:func:`coverkit.coverage.travel_table`), the dispatch rule is the
closest available unit by network travel time, and every replication runs the compiled event loop of
:mod:`coverkit.simulate.kernel` (its docstring states the model). Replications run in parallel processes with
per-replication seeds from :class:`numpy.random.SeedSequence`, so the figures do not depend on the number of
processes. Results are planning estimates, not for live dispatch; validate them locally.
"""
