"""One trial's training: hyperparameters, models, truncated BPTT and each epoch's record.

Imports neither the study library nor SQLAlchemy: storing and scheduling live elsewhere.
"""
