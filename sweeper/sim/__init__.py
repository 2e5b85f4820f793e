"""sim package."""
