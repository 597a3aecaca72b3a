"""Marginal's numerical library: demand models, fitting, elasticities, optimisation."""
