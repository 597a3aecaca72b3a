"""Tests of the service, one folder per feature package of service/."""
