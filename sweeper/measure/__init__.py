"""measure package."""
