"""Figures and HTML pages made from result documents and study records."""
