"""`critline read` command (being written; see the issue tracker)."""
