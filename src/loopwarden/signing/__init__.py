"""loopwarden signing."""
