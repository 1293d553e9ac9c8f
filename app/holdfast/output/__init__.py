"""Every file and text the tool writes: the decisions file and cleaned data set, the report, the terminal
summary, and the export command that writes them from a session."""
