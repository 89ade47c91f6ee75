"""Sweeps: one study per value of one or two scenario keys, and the answer in sentences."""

__all__: list[str] = []
