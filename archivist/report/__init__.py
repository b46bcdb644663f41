"""Report writers: they format a Report, they never compute."""

from .json import render_json
from .text import CAUTION, render_text, write_text

__all__ = ["render_json", "render_text", "write_text", "CAUTION"]
