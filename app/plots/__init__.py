"""pyqtgraph views of the analysis, one kind of plot per file."""
