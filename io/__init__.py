"""Reading microprobe exports and writing results."""

from zoning.io.writers import safe_name, write_csv, write_json, write_text

__all__: list[str] = ["write_csv", "write_json", "write_text", "safe_name"]
