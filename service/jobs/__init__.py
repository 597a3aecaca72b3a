"""Background work: the job queue, the worker, schedules and progress display."""
