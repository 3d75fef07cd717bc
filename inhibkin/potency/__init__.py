"""potency."""
