"""``tidemap demo`` prints the map page's URL (with a working read key) and can open it."""

from __future__ import annotations

import socket
import threading
import time
from pathlib import Path
from typing import Any
from urllib.parse import parse_qs, urlsplit

import pytest

import service.cli
from service.pipeline.keys import KeyVerifier
from service.storage.session import make_engine, make_session_factory
from tests.cli.conftest import Cli


@pytest.fixture
def no_build(monkeypatch: pytest.MonkeyPatch) -> None:
    """The demo without its index build (the slow part; the page does not need it here)."""
    monkeypatch.setattr(service.cli, "build_demo_index", lambda *_: {"id": 1, "state": "published"})


@pytest.fixture
def opened(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    calls: list[str] = []
    monkeypatch.setattr("webbrowser.open", lambda url, *a, **kw: calls.append(url) or True)
    return calls


def _map_line(out: str) -> str:
    (line,) = [ln for ln in out.splitlines() if ln.startswith("map:")]
    return line.removeprefix("map:").strip()


def test_demo_prints_the_map_url(
    cli: Cli, clean_env: pytest.MonkeyPatch, tmp_path: Path, no_build: None, opened: list[str]
) -> None:
    url = f"sqlite:///{tmp_path / 'demo.db'}"
    run = cli("demo", "--no-serve", "--port", "8765", "--database", url)
    assert run.code == 0, run.err
    page = urlsplit(_map_line(run.out))
    assert (page.scheme, page.netloc, page.path) == ("http", "127.0.0.1:8765", "/ui/map")
    assert parse_qs(page.query) == {"collection": [service.cli.DEMO_COLLECTION]}
    fragment = parse_qs(page.fragment)
    assert set(fragment) == {"key"}
    read_key = fragment["key"][0]
    assert f"read key:   {read_key}" in run.out
    engine = make_engine(url)
    try:
        with make_session_factory(engine)() as session:
            assert KeyVerifier(ttl=0.0).scope_of(session, read_key) == "read"
    finally:
        engine.dispose()
    assert opened == []  # --no-serve never opens a browser


def test_demo_open_waits_for_the_server(
    cli: Cli,
    clean_env: pytest.MonkeyPatch,
    tmp_path: Path,
    no_build: None,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    asked: list[tuple[str, int]] = []
    served: list[dict[str, Any]] = []
    monkeypatch.setattr(service.cli, "open_when_listening", lambda u, p: asked.append((u, p)))
    monkeypatch.setattr("uvicorn.run", lambda app, **kw: served.append(kw))
    url = f"sqlite:///{tmp_path / 'demo.db'}"
    run = cli("demo", "--open", "--port", "8766", "--database", url)
    assert run.code == 0, run.err
    assert asked == [(_map_line(run.out), 8766)]
    assert served[0]["port"] == 8766

    asked.clear()
    assert cli("demo", "--port", "8766", "--database", url).code == 0
    assert asked == []  # not without --open


def test_open_when_listening_opens_once_the_port_answers(opened: list[str]) -> None:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    service.cli.open_when_listening("http://page", port, timeout=5.0)
    time.sleep(0.5)
    assert opened == []  # nothing listens yet
    with socket.create_server(("127.0.0.1", port)) as server:
        accepted = threading.Thread(target=lambda: server.accept()[0].close(), daemon=True)
        accepted.start()
        deadline = time.monotonic() + 5.0
        while not opened and time.monotonic() < deadline:
            time.sleep(0.05)
    assert opened == ["http://page"]
