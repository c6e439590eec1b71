"""`critline synth` command (being written; see the issue tracker)."""
