"""What the continuous model does: equilibria, limit cycles, Hopf points, sweeps and basins."""
