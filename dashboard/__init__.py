"""dashboard stage (see DESIGN.md)."""
