"""Reading documents from files for ``tidemap ingest``: JSONL, CSV or a folder of text.

Every reader is a generator of ``(position, raw)`` pairs in the shape
:func:`service.pipeline.documents.upsert_batch` takes: ``raw`` is a document object (a
dict, validated later by ``parse_document``) or the :class:`TidemapError` that says why
that line, row or file could not even be read. A bad line never stops the reading.

Positions are what a person looks for in an editor:

- **JSONL**: the line number (from 1); blank lines are skipped.
- **CSV**: the line number where the record starts (the header is line 1, so the first
  record is line 2; a quoted field may span lines). Columns ``id`` and ``text`` are
  required, ``title`` and ``published_at`` are optional, every other column goes into
  ``metadata`` as a string (empty cells are left out).
- **Folder**: the ordinal of the file in sorted order; :meth:`Source.where` turns it into
  the relative path. Files ending in ``.txt``, ``.md`` or ``.markdown`` are read, at any
  depth, hidden files and folders (name starting with ".") are skipped.

Folder documents:

- **id**: the path relative to the folder, ``/`` written as ``~``, accents dropped, a
  letter or digit of another script written as ``u`` and its hex code point, and every
  other character outside ``A-Z a-z 0-9 . _ -`` replaced by ``_``: ``reports/Harbour
  Plan.md`` becomes ``reports~Harbour_Plan.md``, ``東京.txt`` ``u6771u4eac.txt``. Leading
  ``. _ - ~`` are dropped (an id starts with a letter or digit). A file whose id is
  already taken by an earlier file (``a b.txt`` and ``a_b.txt``) is rejected.
- **title**: the first non-blank line when it is at most 200 characters (Markdown heading
  marks ``#`` stripped); the text is then the rest. Otherwise the title is empty and the
  text is the whole file.
- **published_at**: not set. A file's modification time says when it was copied, not
  when it was written, and putting it in the document would make an untouched file count
  as ``updated`` after every copy. ``metadata`` holds ``{"path": <relative path>}``.
"""

from __future__ import annotations

import csv
import json
import os
import unicodedata
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy.orm import Session

from service.errors import InvalidInputError, MalformedRequestError, NotFoundError, TidemapError
from service.pipeline.collections import create_collection, get_collection
from service.pipeline.documents import REJECTED, BatchSummary, upsert_batch

FORMATS = ("auto", "jsonl", "csv", "text")
TEXT_SUFFIXES = frozenset({".txt", ".md", ".markdown"})
MAX_TITLE_CHARS = 200
CSV_COLUMNS = frozenset({"id", "title", "text", "published_at"})

Item = tuple[int, "dict[str, Any] | TidemapError"]


def detect_format(path: Path) -> str:
    """``text`` for a folder, else from the suffix: .jsonl/.ndjson, .csv/.tsv. A .json file
    is not guessed: it may hold one array rather than an object per line."""
    if path.is_dir():
        return "text"
    suffix = path.suffix.lower()
    if suffix in (".jsonl", ".ndjson"):
        return "jsonl"
    if suffix in (".csv", ".tsv"):
        return "csv"
    raise InvalidInputError(
        f"cannot tell the format of {str(path)!r} from its name; pass --format jsonl, csv or text",
        {"path": str(path)},
    )


@dataclass(frozen=True)
class Source:
    """One input: its format, how many items it expects (None: unknown) and the reader."""

    path: Path
    format: str
    total: int | None = None
    _files: list[str] = field(default_factory=list, repr=False)

    def items(self, *, max_text_bytes: int) -> Iterator[Item]:
        if self.format == "jsonl":
            return read_jsonl(self.path)
        if self.format == "csv":
            return read_csv(self.path, max_text_bytes=max_text_bytes)
        return _read_files(self.path, self._files)

    def where(self, position: int) -> str:
        """Human description of a position: ``line 7`` or ``file notes/a.md``."""
        if self.format == "text":
            if 1 <= position <= len(self._files):
                return f"file {self._files[position - 1]}"
            return f"file #{position}"
        return f"line {position}"


def open_source(path: str | os.PathLike[str], fmt: str = "auto") -> Source:
    """Check that ``path`` exists and fits ``fmt``; for a folder, list its files now."""
    if fmt not in FORMATS:
        raise InvalidInputError(f"format {fmt!r} is not one of {', '.join(FORMATS)}")
    where = Path(path)
    if not where.exists():
        raise InvalidInputError(f"{str(where)!r} does not exist", {"path": str(where)})
    chosen = detect_format(where) if fmt == "auto" else fmt
    if chosen == "text":
        if not where.is_dir():
            raise InvalidInputError(f"--format text needs a folder; {str(where)!r} is a file")
        files = text_files(where)
        return Source(where, chosen, total=len(files), _files=files)
    if where.is_dir():
        raise InvalidInputError(f"{str(where)!r} is a folder; --format {chosen} needs a file")
    return Source(where, chosen)


def _decode_error(what: str, exc: UnicodeDecodeError) -> MalformedRequestError:
    return MalformedRequestError(
        f"{what} is not UTF-8 (invalid byte at position {exc.start})",
        {"position": exc.start},
        code="bad_encoding",
    )


def read_jsonl(path: Path) -> Iterator[Item]:
    """One JSON object per line; position = line number from 1."""
    with path.open("rb") as handle:
        for number, line in enumerate(handle, start=1):
            if not line.strip():
                continue
            try:
                yield number, json.loads(line.decode("utf-8-sig" if number == 1 else "utf-8"))
            except UnicodeDecodeError as exc:
                yield number, _decode_error(f"line {number}", exc)
            except json.JSONDecodeError as exc:
                yield (
                    number,
                    MalformedRequestError(
                        f"line {number} is not valid JSON: {exc.msg} at column {exc.colno}",
                        {"line": number, "column": exc.colno},
                        code="malformed_json",
                    ),
                )


def _has_surrogates(value: str) -> bool:
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        return True
    return False


def read_csv(path: Path, *, max_text_bytes: int) -> Iterator[Item]:
    """A header row naming ``id`` and ``text`` (``title``, ``published_at`` optional);
    other columns become metadata. Position = the line where the record starts."""
    # A text may be up to max_text_bytes; the csv module's default cap is 128 KiB. The
    # limit is process-wide state, so it is only ever raised.
    csv.field_size_limit(max(csv.field_size_limit(), 2 * max_text_bytes + 1024))
    # surrogateescape: an invalid byte spoils only its own row, not the whole file.
    with path.open(encoding="utf-8-sig", errors="surrogateescape", newline="") as handle:
        dialect: type[csv.Dialect] = csv.excel_tab if path.suffix.lower() == ".tsv" else csv.excel
        reader = csv.reader(handle, dialect)
        try:
            header = next(reader)
        except StopIteration:
            return
        except csv.Error as exc:
            yield 1, MalformedRequestError(f"line 1 (the header) cannot be read: {exc}")
            return
        names = [name.strip() for name in header]
        missing = [c for c in ("id", "text") if c not in names]
        duplicated = sorted({n for n in names if names.count(n) > 1})
        if missing or duplicated or _has_surrogates("".join(names)):
            problem = (
                f"lacks the column(s) {', '.join(missing)}"
                if missing
                else f"repeats the column(s) {', '.join(duplicated)}"
                if duplicated
                else "is not UTF-8"
            )
            yield (
                1,
                InvalidInputError(
                    f"the header (line 1) {problem}; it must name id and text "
                    "(title, published_at optional, other columns become metadata)",
                    {"header": names},
                ),
            )
            return
        start = reader.line_num + 1
        while True:
            try:
                row = next(reader)
            except StopIteration:
                return
            except csv.Error as exc:
                yield start, MalformedRequestError(f"line {start} cannot be read as CSV: {exc}")
                start = reader.line_num + 1
                continue
            position, start = start, reader.line_num + 1
            if not any(cell.strip() for cell in row):
                continue  # a blank line
            yield position, _csv_record(names, row, position)


def _csv_record(names: list[str], row: list[str], position: int) -> dict[str, Any] | TidemapError:
    if len(row) != len(names):
        return InvalidInputError(
            f"line {position} has {len(row)} fields; the header has {len(names)}",
            {"line": position, "fields": len(row), "expected": len(names)},
        )
    if any(_has_surrogates(cell) for cell in row):
        return MalformedRequestError(f"line {position} is not UTF-8", code="bad_encoding")
    cells = dict(zip(names, row, strict=True))
    record: dict[str, Any] = {"id": cells["id"].strip(), "text": cells["text"]}
    if "title" in cells:
        record["title"] = cells["title"]
    if cells.get("published_at", "").strip():
        record["published_at"] = cells["published_at"].strip()
    record["metadata"] = {k: v for k, v in cells.items() if k not in CSV_COLUMNS and v != ""}
    return record


def text_files(folder: Path) -> list[str]:
    """Relative POSIX paths of the folder's text files, sorted, hidden entries skipped."""
    found: list[str] = []
    for root, dirs, files in os.walk(folder):
        dirs[:] = [d for d in dirs if not d.startswith(".")]
        for name in files:
            if not name.startswith(".") and Path(name).suffix.lower() in TEXT_SUFFIXES:
                found.append(Path(root, name).relative_to(folder).as_posix())
    return sorted(found)


_ID_SAFE = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789._-")


def _id_char(char: str) -> str:
    if char in _ID_SAFE:
        return char
    if char.isalnum():  # a letter or digit of another script: keep it distinct
        return f"u{ord(char):04x}"
    return "_"


def path_to_id(relative: str) -> str:
    """The document id of a file (rules in the module docstring)."""
    # NFKD splits accented letters into letter + combining mark; the marks are dropped.
    folded = "".join(
        c for c in unicodedata.normalize("NFKD", relative) if not unicodedata.combining(c)
    )
    ident = "~".join("".join(map(_id_char, part)) for part in folded.split("/"))
    stripped = ident.lstrip("._-~")  # an id must start with a letter or digit
    return stripped if stripped else "file"


def split_title(content: str, markdown: bool) -> tuple[str, str]:
    """(title, text) of a file's content (rules in the module docstring)."""
    lines = content.splitlines()
    for i, line in enumerate(lines):
        if not line.strip():
            continue
        title = line.strip()
        if markdown:
            title = title.lstrip("#").strip()
        rest = "\n".join(lines[i + 1 :])
        if len(title) > MAX_TITLE_CHARS or not rest.strip():
            return "", content
        return title, rest.strip("\n")
    return "", content


def _read_files(folder: Path, files: list[str]) -> Iterator[Item]:
    """One document per file; position = ordinal in sorted order (from 1)."""
    owners: dict[str, str] = {}
    for number, relative in enumerate(files, start=1):
        ident = path_to_id(relative)
        if ident in owners:
            yield (
                number,
                InvalidInputError(
                    f"file {relative} maps to the id {ident!r}, already taken by {owners[ident]}; "
                    "rename one of them",
                    {"id": ident, "path": relative},
                    code="duplicate_id",
                ),
            )
            continue
        owners[ident] = relative
        try:
            content = (folder / relative).read_bytes().decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            yield number, _decode_error(f"file {relative}", exc)
            continue
        except OSError as exc:
            yield number, InvalidInputError(f"file {relative} cannot be read: {exc.strerror}")
            continue
        title, text = split_title(content, Path(relative).suffix.lower() != ".txt")
        yield number, {"id": ident, "title": title, "text": text, "metadata": {"path": relative}}


def ingest_source(
    session: Session,
    collection: str,
    source: Source,
    *,
    create: bool,
    max_text_bytes: int,
    chunk_size: int,
    wrap: Callable[[Iterator[Item]], Iterable[Item]] | None = None,
) -> BatchSummary:
    """Upsert everything ``source`` holds, committing every ``chunk_size`` documents; only
    rejected items are listed in the summary. ``wrap`` can decorate the item stream (a
    progress bar). Without ``create`` a missing collection is a NotFoundError."""
    try:
        get_collection(session, collection)
    except NotFoundError:
        if not create:
            raise NotFoundError(
                f"collection {collection!r} does not exist: add --create, or run "
                f"`tidemap collections create {collection}`",
                {"collection": collection},
            ) from None
        session.rollback()
        create_collection(session, collection)
    items = source.items(max_text_bytes=max_text_bytes)
    return upsert_batch(
        session,
        collection,
        wrap(items) if wrap else items,
        max_text_bytes=max_text_bytes,
        chunk_size=chunk_size,
        report_all=False,
    )


def reason(error: dict[str, Any] | None) -> str:
    """One line for a rejection: the message, then each field's problem."""
    if not error:
        return "rejected"
    message = str(error.get("message", "rejected"))
    details = error.get("details")
    if isinstance(details, list):
        problems = [
            f"{d.get('field')}: {d['problem']}"
            for d in details
            if isinstance(d, dict) and "problem" in d
        ]
        if problems:
            message += " - " + "; ".join(problems)
    return message


def describe_rejections(
    summary: BatchSummary, where: Callable[[int], str], *, limit: int = 20
) -> list[str]:
    """Lines naming the first ``limit`` rejected items by position, then how many more."""
    rejected = [item for item in summary.items if item.status == REJECTED]
    lines = []
    for item in rejected[:limit]:
        ident = f" (id {item.id!r})" if item.id else ""
        lines.append(f"rejected {where(item.index)}{ident}: {reason(item.error)}")
    if len(rejected) > limit:
        lines.append(f"... and {len(rejected) - limit} more rejected")
    return lines
