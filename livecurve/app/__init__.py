"""livecurve.app."""
