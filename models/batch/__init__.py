"""Fit many products of one window length at once: the common case of ``fit_many``.

For the least-squares forms, every step :func:`~models.fit.fit_demand` takes for one
product (window, exclusions, design, QR fit, diagnostics, hold-out WAPE, smearing,
warnings, equation) is taken here for a chunk of products on [product, period] arrays,
and each fit record is then filled from ready Python values. A product that needs more
care (a missing variable, a non-positive value under a log, too few observations, terms
to drop, dates not in days) comes back as None for the caller to fit on its own, so
every figure stays that of ``fit_demand``.

Modules: :mod:`~models.batch.stacked` (the entry point: grouping and chunks),
:mod:`~models.batch.layout` (what a group shares, how each product is split),
:mod:`~models.batch.chunk` (exclusions, designs, stacked fits, hold-out WAPE),
:mod:`~models.batch.records` (fit records) and :mod:`~models.batch.arrays` (helpers).
"""

from models.batch.stacked import CHUNK, STACKED_FORMS, fit_stacked, stacked_path_applies

__all__ = ["CHUNK", "STACKED_FORMS", "fit_stacked", "stacked_path_applies"]
