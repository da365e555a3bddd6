"""livecurve.signal."""
