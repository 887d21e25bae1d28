"""From the raw table to canonical columns in cm / kg / mmHg: mapping, cells, dates, validation."""
