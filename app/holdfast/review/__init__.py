"""The decisions: the journal, where sessions live, the decisions table and applying it, the what-if refit."""
