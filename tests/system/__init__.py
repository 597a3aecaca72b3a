"""Tests of the whole running service: fuzzing, concurrency, faults, hostile input, load."""
