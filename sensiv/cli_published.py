"""Command `sensiv published` (registered on the shared typer app when imported)."""

from __future__ import annotations
