"""The networks: activation and head registry, losses, optimizers and the NumPy engine."""
