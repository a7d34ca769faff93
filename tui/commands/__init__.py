"""One module per ``probelog`` subcommand.

Each module defines ``HELP`` (one line), ``add_arguments(parser)`` and
``run(args) -> int``. Keep module-level imports light: every module is imported
to build ``--help``; import numpy, scikit-rf, pyvisa or textual inside ``run``.
"""
