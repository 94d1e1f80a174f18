"""Identification of a cell model from lab tests (low-rate OCV test, pulse test, refinement)."""
