"""ingest stage (see DESIGN.md)."""
