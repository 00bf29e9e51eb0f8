"""Shipped robot descriptions, example choreographies and session plans (data only)."""

from pathlib import Path

#: Folder that holds the shipped data files.
DATA_DIR = Path(__file__).resolve().parent

__all__ = ["DATA_DIR"]
