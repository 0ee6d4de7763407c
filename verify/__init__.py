"""orbitfix verification side: host bit-exactness through cffi, and the command line.

Reads what ``gen`` produced; ``gen`` never imports this package.
"""
