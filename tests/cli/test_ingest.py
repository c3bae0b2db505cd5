from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from service.pipeline.collections import get_collection
from service.pipeline.documents import get_document
from service.storage.session import make_engine, make_session_factory
from tests.cli.conftest import Cli

TEXT = "The harbour committee met to discuss moorings, tides and the new ferry timetable."


def _stored(url: str, collection: str, *ids: str) -> tuple[int, dict[str, dict[str, Any]]]:
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            count = get_collection(session, collection)["documents"]
            return count, {i: get_document(session, collection, i) for i in ids}
    finally:
        engine.dispose()


def _summary_line(out: str) -> str:
    return out.splitlines()[0]


def test_ingest_jsonl(cli: Cli, sqlite_url: str, tmp_path: Path) -> None:
    lines = [
        json.dumps({"id": "a-1", "title": "Ferry", "text": TEXT, "metadata": {"desk": "port"}}),
        "",  # blank lines are skipped, not rejected
        '{"id": "a-2", "text": "unterminated',  # malformed JSON: line 3
        json.dumps({"id": "a-3", "text": TEXT, "published_at": "2021-05-06"}),
        json.dumps({"id": "a-4", "text": "   "}),  # invalid document: line 5
        json.dumps({"id": "a-5", "text": TEXT}),
    ]
    path = tmp_path / "docs.jsonl"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")

    run = cli("ingest", str(path), "--collection", "news", "--create", "--quiet")
    assert run.code == 1  # some documents were rejected
    assert "3 inserted, 0 updated, 0 unchanged, 2 rejected" in _summary_line(run.out)
    rejections = run.out.splitlines()[1:]
    assert len(rejections) == 2
    assert "line 3" in rejections[0] and "not valid JSON" in rejections[0]
    assert "line 5" in rejections[1] and "'a-4'" in rejections[1] and "text" in rejections[1]

    count, docs = _stored(sqlite_url, "news", "a-1", "a-3")
    assert count == 3
    assert docs["a-1"]["title"] == "Ferry"
    assert docs["a-1"]["metadata"] == {"desk": "port"}
    assert docs["a-3"]["published_at"].startswith("2021-05-06")

    again = cli("ingest", str(path), "--collection", "news", "--quiet")
    assert "0 inserted, 0 updated, 3 unchanged, 2 rejected" in _summary_line(again.out)


def test_ingest_csv(cli: Cli, sqlite_url: str, tmp_path: Path) -> None:
    path = tmp_path / "docs.csv"
    path.write_text(
        "id,title,text,published_at,section\n"  # line 1
        f'c-1,Ferry,"{TEXT}",2020-01-02,port\n'  # line 2
        f'c-2,Quote,"{TEXT}\nA second line, inside quotes.",,council\n'  # lines 3-4
        "c-3,Short row,only three fields\n"  # line 5: wrong number of fields
        f'c-4,,"{TEXT}",not a date,\n',  # line 6: bad published_at
        encoding="utf-8",
    )
    run = cli("ingest", str(path), "--collection", "news", "--create", "--quiet")
    assert run.code == 1
    assert "2 inserted, 0 updated, 0 unchanged, 2 rejected" in _summary_line(run.out)
    rejections = run.out.splitlines()[1:]
    assert "line 5" in rejections[0] and "3 fields" in rejections[0]
    assert "line 6" in rejections[1] and "published_at" in rejections[1]

    count, docs = _stored(sqlite_url, "news", "c-1", "c-2")
    assert count == 2
    assert docs["c-1"]["metadata"] == {"section": "port"}
    assert docs["c-1"]["published_at"].startswith("2020-01-02")
    assert docs["c-2"]["text"].endswith("A second line, inside quotes.")
    assert docs["c-2"]["published_at"] is None


def test_ingest_csv_without_text_column(cli: Cli, sqlite_url: str, tmp_path: Path) -> None:
    path = tmp_path / "docs.csv"
    path.write_text("id,body\nx,hello\n", encoding="utf-8")
    run = cli("ingest", str(path), "--collection", "news", "--create", "--quiet")
    assert run.code == 1
    assert "1 rejected" in _summary_line(run.out)
    assert "line 1" in run.out and "text" in run.out


def test_ingest_folder(cli: Cli, sqlite_url: str, tmp_path: Path) -> None:
    folder = tmp_path / "archive"
    (folder / "council").mkdir(parents=True)
    (folder / ".drafts").mkdir()
    (folder / "ferry.txt").write_text(f"New ferry timetable\n\n{TEXT}\n", encoding="utf-8")
    (folder / "council" / "Budget Plan.md").write_text(f"# Budget plan\n\n{TEXT}", "utf-8")
    (folder / "council" / "broken.txt").write_bytes(b"Title\n\nbad byte \xff here")
    (folder / ".drafts" / "secret.txt").write_text(TEXT, encoding="utf-8")  # hidden
    (folder / "scan.pdf").write_bytes(b"%PDF-1.4")  # not a text file

    run = cli("ingest", str(folder), "--collection", "files", "--create", "--quiet")
    assert run.code == 1
    assert "(text," in _summary_line(run.out)
    assert "2 inserted, 0 updated, 0 unchanged, 1 rejected" in _summary_line(run.out)
    rejections = run.out.splitlines()[1:]
    assert len(rejections) == 1
    assert "file council/broken.txt" in rejections[0] and "UTF-8" in rejections[0]

    count, docs = _stored(sqlite_url, "files", "ferry.txt", "council~Budget_Plan.md")
    assert count == 2
    assert docs["ferry.txt"]["title"] == "New ferry timetable"
    assert docs["ferry.txt"]["text"].strip() == TEXT
    assert docs["council~Budget_Plan.md"]["title"] == "Budget plan"
    assert docs["council~Budget_Plan.md"]["metadata"] == {"path": "council/Budget Plan.md"}


def test_ingest_needs_create_for_a_new_collection(
    cli: Cli, sqlite_url: str, tmp_path: Path
) -> None:
    path = tmp_path / "docs.jsonl"
    path.write_text(json.dumps({"id": "x", "text": TEXT}) + "\n", encoding="utf-8")
    run = cli("ingest", str(path), "--collection", "news")
    assert run.code == 1
    assert "--create" in run.err


@pytest.mark.parametrize(
    ("name", "fmt", "problem"),
    [("docs.xml", "auto", "--format"), ("missing.jsonl", "auto", "does not exist")],
)
def test_ingest_unreadable_input(
    cli: Cli, sqlite_url: str, tmp_path: Path, name: str, fmt: str, problem: str
) -> None:
    if name != "missing.jsonl":
        (tmp_path / name).write_text("<docs/>", encoding="utf-8")
    run = cli("ingest", str(tmp_path / name), "--collection", "news", "--format", fmt)
    assert run.code == 1
    assert problem in run.err
