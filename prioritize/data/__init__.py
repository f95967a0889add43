"""Generated data shipped with the package (track grid and its provenance) and the tool that builds it."""
