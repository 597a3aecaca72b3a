"""Tests of service/estimation."""
