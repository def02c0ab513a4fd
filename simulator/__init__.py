"""simulator package."""
