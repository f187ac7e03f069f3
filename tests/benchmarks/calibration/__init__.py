"""Seeded calibration simulations: the error rates and coverages behind the service's verdicts."""
