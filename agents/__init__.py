"""crossflock.agents (under construction)."""
