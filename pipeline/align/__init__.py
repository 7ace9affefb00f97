"""align stage."""
