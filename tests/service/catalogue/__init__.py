"""Tests of service/catalogue."""
