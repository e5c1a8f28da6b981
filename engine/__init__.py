"""Isotide engine: numerics and file formats for level-set outlining.

The engine is the functional core of Isotide: arrays in, arrays out, no Qt and
no global state. Everything the window can do, a script can do through it.
"""

__version__ = "0.1.0"
