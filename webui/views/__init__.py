"""One blueprint per area of the dashboard."""
