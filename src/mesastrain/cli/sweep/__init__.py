"""Design sweeps: many variants of one case, run in parallel on Dask.

A sweep file (TOML) names a base case, the case-file keys to vary and the
figures to collect from each result's ``summary.json``; ``mesastrain sweep``
runs every case and tabulates the figures. The modules, in the order they
import each other:

:mod:`~mesastrain.cli.sweep.spec`
    the sweep file: reading, validating, key paths into a case file.
:mod:`~mesastrain.cli.sweep.expand`
    the varied values expanded into validated cases, and the case hash.
:mod:`~mesastrain.cli.sweep.figures`
    figure paths into ``summary.json`` and their units.
:mod:`~mesastrain.cli.sweep.worker`
    one case solved on a Dask worker; the Dask client.
:mod:`~mesastrain.cli.sweep.store`
    the sweep folder: layout, finished case folders, lock, event log.
:mod:`~mesastrain.cli.sweep.tables`
    the results table, metadata, plots and the printed summary.
:mod:`~mesastrain.cli.sweep.driver`
    :func:`~mesastrain.cli.sweep.driver.run_sweep`: run (or resume) a sweep.
:mod:`~mesastrain.cli.sweep.command`
    the ``mesastrain sweep`` command.
"""
