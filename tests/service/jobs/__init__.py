"""Tests of service/jobs."""
