"""Rules of the loss family (see ../shared/spec rules catalogue)."""
