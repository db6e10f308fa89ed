"""rgftrans: tight-binding quantum transport by recursive Green's functions."""

__version__ = "0.1.0"
