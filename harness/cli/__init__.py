"""The ``pfcrig`` command line: a thin dispatcher (``main``) and one module per command."""

from .main import main

__all__ = ["main"]
