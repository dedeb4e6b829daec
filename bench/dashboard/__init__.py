"""The live terminal dashboard (textual)."""
