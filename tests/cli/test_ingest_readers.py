"""The file readers behind ``tidemap ingest`` (service/pipeline/ingest_files.py)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from service.errors import InvalidInputError, TidemapError
from service.pipeline.document_input import ID_PATTERN
from service.pipeline.ingest_files import open_source, path_to_id, read_csv, read_jsonl, split_title
from tests.cli.conftest import Cli


@pytest.mark.parametrize(
    ("relative", "expected"),
    [
        ("ferry.txt", "ferry.txt"),
        ("council/2021/budget.md", "council~2021~budget.md"),
        ("council/Budget Plan.md", "council~Budget_Plan.md"),
        ("Café au lait.txt", "Cafe_au_lait.txt"),
        ("a~b.txt", "a_b.txt"),
        ("_notes/x.txt", "notes~x.txt"),
        ("東京.txt", "u6771u4eac.txt"),
        ("news/№ 5 ☂.md", "news~No_5__.md"),
    ],
)
def test_path_to_id(relative: str, expected: str) -> None:
    ident = path_to_id(relative)
    assert ident == expected
    assert ID_PATTERN.match(ident)


@pytest.mark.parametrize(
    ("content", "markdown", "title", "text"),
    [
        ("Title\n\nBody text.", False, "Title", "Body text."),
        ("\n\n## Heading ##\nBody", True, "Heading ##", "Body"),
        ("# Not stripped in .txt\nBody", False, "# Not stripped in .txt", "Body"),
        ("Only one line", False, "", "Only one line"),
        ("x" * 201 + "\nrest", False, "", "x" * 201 + "\nrest"),
    ],
)
def test_split_title(content: str, markdown: bool, title: str, text: str) -> None:
    assert split_title(content, markdown) == (title, text)


def test_folder_ids_that_collide_are_rejected(tmp_path: Path) -> None:
    (tmp_path / "a b.txt").write_text("one\n\ntext one", encoding="utf-8")
    (tmp_path / "a_b.txt").write_text("two\n\ntext two", encoding="utf-8")
    source = open_source(tmp_path)
    items = list(source.items(max_text_bytes=10_000))
    assert source.total == 2
    assert isinstance(items[0][1], dict) and items[0][1]["id"] == "a_b.txt"
    position, error = items[1]
    assert isinstance(error, InvalidInputError)
    assert source.where(position) == "file a_b.txt"
    assert "a b.txt" in error.message


def test_jsonl_positions_bom_and_bad_bytes(tmp_path: Path) -> None:
    path = tmp_path / "d.jsonl"
    path.write_bytes(
        b"\xef\xbb\xbf" + json.dumps({"id": "a", "text": "t"}).encode() + b"\n"
        b"\n"
        b'{"id": "b", "text": "\xff"}\n'
        b"[1, 2]\n"
    )
    items = list(read_jsonl(path))
    assert [p for p, _ in items] == [1, 3, 4]
    assert items[0][1] == {"id": "a", "text": "t"}
    assert isinstance(items[1][1], TidemapError) and "UTF-8" in items[1][1].message
    assert items[2][1] == [1, 2]  # parsed; parse_document rejects it later


def test_csv_bom_tsv_and_bad_bytes(tmp_path: Path) -> None:
    tsv = tmp_path / "d.tsv"
    tsv.write_bytes(b"\xef\xbb\xbfid\ttext\tdesk\nx\thello\tport\ny\tbad \xff\t\n")
    items = list(read_csv(tsv, max_text_bytes=10_000))
    assert items[0] == (2, {"id": "x", "text": "hello", "metadata": {"desk": "port"}})
    position, error = items[1]
    assert position == 3 and isinstance(error, TidemapError) and "UTF-8" in error.message


def test_csv_holds_texts_above_the_csv_module_default(tmp_path: Path) -> None:
    big = "word " * 40_000  # 200 KB: above the csv module's 128 KiB field limit
    path = tmp_path / "d.csv"
    path.write_text(f"id,text\nbig,{big}\n", encoding="utf-8")
    ((position, record),) = read_csv(path, max_text_bytes=1 << 20)
    assert position == 2 and isinstance(record, dict) and record["text"] == big


def test_only_the_first_twenty_rejections_are_listed(
    cli: Cli, sqlite_url: str, tmp_path: Path
) -> None:
    path = tmp_path / "bad.jsonl"
    path.write_text("".join(f'{{"id": "d{i}"}}\n' for i in range(25)), encoding="utf-8")
    run = cli("ingest", str(path), "--collection", "news", "--create", "--quiet")
    assert run.code == 1
    lines = run.out.splitlines()
    assert "0 inserted, 0 updated, 0 unchanged, 25 rejected" in lines[0]
    assert len(lines) == 1 + 20 + 1
    assert lines[1].strip().startswith("rejected line 1 (id 'd0')")
    assert lines[-1].strip() == "... and 5 more rejected"
