"""glitch."""
