"""livecurve.config."""
