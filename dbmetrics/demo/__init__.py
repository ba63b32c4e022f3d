"""Deterministic demo prediction logs for an invented return-reason classifier (see demo_parquet/README.md)."""

from .dataset import generate

__all__ = ["generate"]
