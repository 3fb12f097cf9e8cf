"""Invented demo scenarios, regenerated from fixed seeds."""
