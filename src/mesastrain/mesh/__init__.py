"""mesh layer of mesastrain."""
