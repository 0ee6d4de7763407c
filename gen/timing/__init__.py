"""From model time to the loop rate: the step size and the integrators' step maps."""
