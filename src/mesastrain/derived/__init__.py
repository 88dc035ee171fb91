"""derived layer of mesastrain."""
