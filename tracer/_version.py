"""The version of corpus-tracer (a module of its own: every layer may read it, none imports the package root)."""

__version__ = "0.1.0"
