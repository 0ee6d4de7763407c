"""The model a user writes: expressions, definitions, model files and networks."""
