"""The studies layer: many analyses of one design.

Sweeps and target searches (and grids of them), the batched evaluator and
Monte Carlo built on it, the executors that run chunks locally or on a Dask
cluster, bench measurements and fitting a design to them. It imports the
analysis, circuit and design layers only.
"""
