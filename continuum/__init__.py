"""crossflock.continuum (under construction)."""
