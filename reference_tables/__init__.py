"""Bundled reference sets (CSV); see wallstress.references for the format."""
