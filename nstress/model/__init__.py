"""Model layer: the forward model, the PyMC model, fitting and diagnostics."""
