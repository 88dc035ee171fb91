"""case layer of mesastrain."""
