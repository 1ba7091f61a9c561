"""The window's panels, one widget per file."""
