"""Reference values with their sources, and a reader for them."""
