"""Layer: answers."""
