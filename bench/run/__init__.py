"""A run as it happens: readers, the consumer, history, the measurement and its processes, replay."""
