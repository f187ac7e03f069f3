"""Seeded simulations behind bench_calibration.py: each module returns named figures."""
