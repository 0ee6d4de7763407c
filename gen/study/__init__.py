"""Studies of the stepped cycle: the integer map's period and amplitude, and plan searches."""
