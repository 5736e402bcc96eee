"""features stage (see DESIGN.md)."""
