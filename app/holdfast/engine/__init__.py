"""holdfast.engine."""
