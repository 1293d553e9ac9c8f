"""holdfast.ui.widgets."""
