"""The generator's version: stamped into every generated file and its content hash."""

__version__ = "0.3.0"
