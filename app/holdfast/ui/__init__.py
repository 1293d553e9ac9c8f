"""holdfast.ui."""
