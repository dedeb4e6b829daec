"""A simulated pump-probe bench served on loopback through the device side of real protocols."""
