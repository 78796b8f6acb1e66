"""biasbridge: hand square-law analysis, an own level-1 solver and ngspice, side by side."""

__version__ = "0.1.0"
