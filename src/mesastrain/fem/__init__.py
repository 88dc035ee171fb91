"""fem layer of mesastrain."""
