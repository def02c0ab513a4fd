"""dashboard package."""
