"""Activation Workbench: test activation choices for small networks on tabular data."""

__version__ = "0.1.0"
