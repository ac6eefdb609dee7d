"""Layer: fitting."""
