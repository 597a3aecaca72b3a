"""Tests of service/pricing."""
