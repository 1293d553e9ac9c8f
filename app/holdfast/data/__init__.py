"""holdfast.data."""
