"""The root of the test tree: session-wide settings and the shared plugins.

Shared fixtures and helpers live in ``tests/plugins/`` and are registered here; test
modules take fixtures by name and import plain helpers from a plugin module, never from
this file or from another test module.
"""

from __future__ import annotations

import os

# Tests start the job worker and the scheduler themselves where they need them.
os.environ.setdefault("MARGINAL_WORKER_ENABLED", "false")
os.environ.setdefault("MARGINAL_SCHEDULER_ENABLED", "false")

pytest_plugins = [
    "tests.plugins.storage",
    "tests.plugins.live_server",
    "tests.plugins.fit_cases",
    "tests.plugins.pricing_cases",
    "tests.plugins.reference_data",
    "tests.plugins.reference_checks",
    "tests.plugins.ui_pages",
]
