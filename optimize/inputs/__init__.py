"""Floor 1, the input files: schema, TOML reader with located errors, description."""
