"""The proofs: bit-exact agreement, long-run drift and the lattice certificate."""
