"""Design exploration: compare process options, sweep inputs, sensitivity and uncertainty.

Modules build on the solver and the evaluator and never print: ``paths`` (addressing any
numeric input of a problem file), ``fixed`` (re-pricing a chosen design under other
inputs), ``parallel`` (local processes or a Dask cluster), ``compare``, ``sweep``,
``sensitivity``, ``uncertainty`` and ``plots``. The command line is in
``optimizer/cli_explore.py``.

This package file imports nothing on purpose: the schema imports ``paths`` to check the
paths of ``[[uncertain]]`` entries, and that must not pull in the solver.
"""
