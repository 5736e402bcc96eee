"""models stage (see DESIGN.md)."""
