"""`critline batch` command (being written; see the issue tracker)."""
