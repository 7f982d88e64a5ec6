"""What a study stores: connections, our tables, epoch rows, checkpoints, trial attributes."""
