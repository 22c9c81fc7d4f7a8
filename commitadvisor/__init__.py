"""commitadvisor: how database commits should become durable.

The library entry points are imported lazily so that ``import commitadvisor`` stays cheap.
"""

__all__ = ["__version__"]

__version__ = "0.1.0"
