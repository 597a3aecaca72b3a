"""The catalogue: products, their sales observations, CSV imports and the demo shop."""
