"""Studies built from the layers above: compare clamp options, sweeps, choice, tolerances."""
