"""Demand estimation: histories, fits and their quality gates, and refit jobs."""
