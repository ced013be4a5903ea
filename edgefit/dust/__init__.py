"""edgefit.dust: X-ray optical constants, Mie/ADT efficiencies, size distributions, dust tables."""
