"""The six count families: two count kernels times three zero mechanisms."""

from bayeszi.families.core import FAMILY_NAMES, Family, get_family

__all__ = ["FAMILY_NAMES", "Family", "get_family"]
