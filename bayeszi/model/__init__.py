"""Layer: model."""
