"""plan package."""
