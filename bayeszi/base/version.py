"""The version of bayeszi, in one place (the package, saved files and reports read it).

Example
-------
>>> from bayeszi.base.version import __version__
>>> __version__.count(".") >= 1
True
"""

__version__ = "0.1.0"
