"""Every text and JSON rendering of results, fed by the same data."""
