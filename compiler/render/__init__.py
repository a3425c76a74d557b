"""Renderers: the only code that writes files."""
