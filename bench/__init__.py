"""gainbench: pump-probe gain and inversion measurements on the optical bench."""

__version__ = "0.1.0"
