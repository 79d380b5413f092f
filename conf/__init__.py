"""wsad's Hydra configuration, shipped inside the package as ``wsad.conf``."""
