"""The entry points for reading rule files (see :mod:`rules.load`)."""

from .load import load_file, load_text

__all__ = ["load_file", "load_text"]
