"""Issue 12 item 8: the README's Codebook section gives an example the reader accepts as written."""
from __future__ import annotations

import re
from pathlib import Path

from server.intake.codebook import read_codebook

README = Path(__file__).resolve().parents[2] / "README.md"


def test_the_readme_codebook_example_reads():
    text = README.read_text(encoding="utf-8")
    section = text.split("## Codebook", 1)[1].split("\n## ", 1)[0]
    example = re.search(r"```csv\n(.*?)```", section, re.S).group(1)
    book = read_codebook(example.encode(), "example.csv")
    assert list(book.entries) == ["W1", "C3", "O1"]
    assert [e.reverse for e in book.entries.values()] == [False, True, False]  # demo_data/README.md: C3
    assert book.entries["C3"].construct == "contribution" and book.entries["W1"].max == 5
