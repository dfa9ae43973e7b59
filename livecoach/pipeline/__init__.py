"""The processing pipeline: a pure, deterministic function of the event sequence."""
