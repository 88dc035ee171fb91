"""cli.sweep layer of mesastrain."""
