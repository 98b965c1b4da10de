"""Persistence: the only layer that knows SQL (models, engines, raw and series stores)."""
