"""Reading microprobe exports and writing results."""

from zoning.io.traverses import read_traverses
from zoning.io.writers import safe_name, write_csv, write_json, write_text

__all__: list[str] = ["read_traverses", "write_csv", "write_json", "write_text", "safe_name"]
