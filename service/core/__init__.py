"""The shared core: application factory, database, settings, errors, limits, logs,
metrics, pagination and the HTTP edge's common pieces."""
