"""Layer: base."""
