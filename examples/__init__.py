"""Invented demo scenarios, shipped inside the package as ``studylog.examples``."""
