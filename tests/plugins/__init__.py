"""Shared fixtures and helpers of the test suite, registered as pytest plugins.

Each module is named in ``pytest_plugins`` of ``tests/conftest.py``; its fixtures are
available to every test, and its plain helpers are imported from it by name.
"""
