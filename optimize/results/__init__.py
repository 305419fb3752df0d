"""Floor 4, results as xarray Datasets: front and trials, solution, tolerance study."""
