"""Tests of service/core."""
