"""Sub-commands of ``workbench``.

Each module in this package defines ``NAME`` (the sub-command), ``HELP`` (one
line), ``add_arguments(parser)`` and ``run(args) -> int``. The dispatcher in
:mod:`workbench.cli` discovers them, so adding a command touches one file.

``NAME`` and ``HELP`` are plain string literals: the dispatcher reads them from
the module's source without importing it, and imports only the module of the
command being run, so ``workbench --help`` loads no heavy library. Keep a
command module's own imports light (the standard library and light workbench
modules) and import NumPy, pandas, scikit-learn and the sweep machinery inside
``run``, so that ``workbench COMMAND --help`` stays fast too.
"""
