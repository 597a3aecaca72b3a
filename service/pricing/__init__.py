"""Pricing: recommended prices for a product or a family, and reprice jobs."""
