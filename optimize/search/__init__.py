"""Floor 3, the search: storages, samplers, workers and heartbeats, the batch loop."""
