"""Stage 1: sequence text -> parsed program tree (see docs/language.md)."""

from .parser import SEQUENCE_SUFFIX, parse_path, parse_text
from .printer import format_source
from . import tree

__all__ = ["parse_path", "parse_text", "format_source", "tree", "SEQUENCE_SUFFIX"]
