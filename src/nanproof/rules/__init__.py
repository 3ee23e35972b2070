"""Rule declarations, one module per family."""
