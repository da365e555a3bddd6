"""livecurve.engine."""
