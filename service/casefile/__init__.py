"""Case files of decided cycles: the evidence in one document (JSON and PDF)."""
from .build import build_casefile

__all__ = ["build_casefile"]
