"""Tests of service/ui."""
