"""loopwarden report."""
