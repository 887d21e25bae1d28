"""Input fields, units, header matching and the registry of output columns."""
