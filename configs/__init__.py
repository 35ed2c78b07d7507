"""Scenario files shipped with crossflock (TOML); see README "Scenarios"."""
