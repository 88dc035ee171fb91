"""cli layer of mesastrain."""
