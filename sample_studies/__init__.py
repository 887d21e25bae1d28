"""Invented sample studies for the demo (see make_samples.py). No real people or records."""
