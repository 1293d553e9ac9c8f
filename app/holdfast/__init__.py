"""holdfast: find the rows a classifier rests on, and the rows that are probably mislabelled."""

__version__ = "0.1.0"
