"""Rules of the elementary family (see ../shared/spec rules catalogue)."""
