"""Hostile JSON bodies: run specs, JSON epoch sets and epoching specs (see tests/corpus/cases.py)."""

from pathlib import Path

SPECS = Path(__file__).parent
