"""orbitfix generation side: model -> analysis -> timing -> fixed-point plan -> integer program -> C.

Nothing in this package imports ``verify``: data flows one way.
"""

__version__ = "0.1.0"
