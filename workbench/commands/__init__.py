"""Sub-commands of ``workbench``.

Each module in this package defines ``NAME`` (the sub-command), ``HELP`` (one
line), ``add_arguments(parser)`` and ``run(args) -> int``. The dispatcher in
:mod:`workbench.cli` discovers them, so adding a command touches one file.
"""
