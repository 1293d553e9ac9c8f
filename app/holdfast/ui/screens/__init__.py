"""holdfast.ui.screens."""
