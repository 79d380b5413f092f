"""wsad's sweep launcher for Hydra (``hydra/launcher=workers``): see :mod:`wsad.sweep`."""
