"""ingest stage."""
