"""pytest entry point (placeholder until the pytest layer lands)."""
