"""Layer: plots."""
