"""`critline identify` command (being written; see the issue tracker)."""
