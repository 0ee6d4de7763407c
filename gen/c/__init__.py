"""The C back end: names that are safe in C and the rendering of the integer program."""
