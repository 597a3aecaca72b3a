"""Marginal's HTTP, storage, jobs and CLI layer."""
