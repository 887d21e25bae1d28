"""One module per picture, and what they share."""
