"""Reporting: text tables, JSON and plots. Reads results; never recomputes physics."""
