"""Rendering (jinja2) and building (cffi, cross-compilers) of the generated C."""
