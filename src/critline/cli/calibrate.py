"""`critline calibrate` command (being written; see the issue tracker)."""
