"""The mass budget: momentum and rocket physics, the budget table and the joint exclusion test."""
