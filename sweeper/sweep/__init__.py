"""Running many trials: the launcher, its coordinator and lease, workers, the pool, clusters."""
