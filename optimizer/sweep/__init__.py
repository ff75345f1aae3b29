"""Sweeps: one task solved over many variants, on a local pool or a Dask cluster.

- ``spec``      the sweep file: axes, variants, objectives (validation, expansion)
- ``variant``   one variant's task (axis values applied, model quantities)
- ``job``       what a worker does for one variant: seed, objectives, certification
- ``store``     the results folder: manifest, atomic records and plans, resume, summary
- ``engines``   where jobs run: a local process pool or a Dask distributed cluster
- ``runner``    the coordinator: scheduling, neighbour warm starts, progress, Ctrl-C
- ``figures``   margins against each parameter, the margin map, solved shares
"""
