"""Results, findings and methods written next to (never over) the user's data."""
