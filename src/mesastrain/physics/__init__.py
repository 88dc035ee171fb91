"""physics layer of mesastrain."""
