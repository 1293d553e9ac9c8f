"""holdfast.insight."""
