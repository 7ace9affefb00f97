"""One module per CLI command; each does `from pipeline.cli import app, guarded`."""
