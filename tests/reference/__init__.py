"""Tests against published check values; the reference files here carry their sources."""
