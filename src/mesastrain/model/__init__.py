"""model layer of mesastrain."""
