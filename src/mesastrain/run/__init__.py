"""run layer of mesastrain."""
