"""The ``mesastrain`` command line: :mod:`~mesastrain.cli.main` and one module per
command (``run``, ``check``, ``materials``, ``sweep``, ``raman-stress``,
``verify``, ``view``). The only layer that imports argparse."""
