"""Floor 2, from a spec to numbers: designs, search space, growth errors, objectives."""
