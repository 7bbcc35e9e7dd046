"""The networks: the activation and head registry (activations), the losses matched with
the heads (losses), the forward and backward passes (network), the optimisers
(optimizers), layer health (health) and the scikit-learn estimators (engine)."""
