"""crossflock.compare (under construction)."""
