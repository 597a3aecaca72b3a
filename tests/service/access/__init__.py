"""Tests of service/access."""
