"""snnconvert: from DVS event recordings to single-spike integer networks and hardware tables."""

__version__ = "0.1.0"
