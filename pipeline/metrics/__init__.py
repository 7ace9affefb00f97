"""metrics stage."""
