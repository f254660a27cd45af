"""Terminal UI for the field technician (textual)."""
