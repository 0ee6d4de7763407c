"""What runs the generated C: the host build through cffi (boards come beside it)."""
