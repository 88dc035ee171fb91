"""io layer of mesastrain."""
