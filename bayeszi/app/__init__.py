"""Layer: app."""
