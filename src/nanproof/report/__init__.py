"""Reports: one module per format, each a ``render(result, ...) -> str`` function."""
