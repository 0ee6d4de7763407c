"""Every rendering of a result for people (text) and for programs (JSON), in one place.

Each module renders one kind of result from the same data the computation returns, so another
renderer (HTML, say) can be added beside the text and JSON ones without touching the computation.
"""
