"""Validation of bayeszi's inference: SBC, interval coverage and an open data set.

Run from the repository root: ``python -m validation.sbc``, ``python -m validation.coverage``,
``python -m validation.randhie`` (see docs/validation.md).
"""
