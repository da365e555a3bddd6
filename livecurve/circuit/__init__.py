"""livecurve.circuit."""
