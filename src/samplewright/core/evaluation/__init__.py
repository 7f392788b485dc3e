"""Evaluation runs: passage sets, runs of presets × passages × samples, sweeps,
measures with bootstrap intervals, the Pareto front and the report.

See docs/evaluation.md for every measure and its source. No Qt here; torch is
imported only by the runner's callers (the engine).
"""
