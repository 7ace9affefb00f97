"""models stage."""
