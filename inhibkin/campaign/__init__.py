"""campaign."""
