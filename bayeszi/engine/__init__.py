"""Layer: engine."""
