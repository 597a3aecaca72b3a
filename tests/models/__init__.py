"""Tests of the numerical library, models/."""
