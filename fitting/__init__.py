"""Inversion of measured traverses with forward crystallization models."""

__all__: list[str] = []
