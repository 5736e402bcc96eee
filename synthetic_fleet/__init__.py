"""synthetic_fleet stage (see DESIGN.md)."""
