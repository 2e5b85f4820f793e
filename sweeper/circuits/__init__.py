"""circuits package."""
