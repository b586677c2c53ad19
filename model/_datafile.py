"""The model's self-describing data files: `# key: value` header lines, then a CSV table."""

from __future__ import annotations

import csv
import io

__all__ = ["parse_commented_csv"]


def parse_commented_csv(text: str) -> tuple[dict[str, str], list[dict[str, str]]]:
    """The header (``# key: value`` lines, anywhere in the file) and the rows of the CSV table."""
    header: dict[str, str] = {}
    body: list[str] = []
    for line in text.splitlines():
        if line.startswith("#"):
            key, _, value = line[1:].partition(":")
            header[key.strip()] = value.strip()
        elif line.strip():
            body.append(line)
    return header, list(csv.DictReader(io.StringIO("\n".join(body))))
