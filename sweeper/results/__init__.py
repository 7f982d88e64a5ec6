"""Commands that read a study: status, the best trial and its refit, replay, saved models."""
