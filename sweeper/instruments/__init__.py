"""instruments package."""
