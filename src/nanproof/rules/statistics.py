"""Rules of the statistics family (see ../shared/spec rules catalogue)."""
