"""File outputs: rendered clips and stills, curves, step responses, CLF LUTs, SPICE decks."""
