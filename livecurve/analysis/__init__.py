"""Design analysis: the chain summary, drift with temperature, spread with tolerance."""
