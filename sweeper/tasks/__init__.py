"""Sequence tasks: the built-in families (one module each), own data files and plugins."""
