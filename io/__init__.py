"""Reading microprobe exports and writing results."""

__all__: list[str] = []
