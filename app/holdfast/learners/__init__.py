"""holdfast.learners."""
