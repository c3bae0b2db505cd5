"""The server side of ``bench query``: uvicorn's options, its routes and readiness, and
CPU and memory of its process tree (a supervisor and its workers) read from /proc."""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import httpx

from service.bench.ingest import _cpu_seconds, _proc_status_mb


def _children(pid: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                stat = (entry / "stat").read_text().rpartition(")")[2].split()
            except OSError:
                continue
            if int(stat[1]) == pid:  # after the name: state, then the parent's pid
                found.append(int(entry.name))
    return found


def process_tree(pid: int) -> list[int]:
    """``pid`` and its descendants (a uvicorn supervisor and its workers)."""
    tree, todo = [], [pid]
    while todo:
        current = todo.pop()
        tree.append(current)
        todo += _children(current)
    return tree


def tree_cpu_seconds(pid: int) -> dict[int, float]:
    """CPU seconds of ``pid`` and each of its descendants."""
    return {p: _cpu_seconds(p) or 0.0 for p in process_tree(pid)}


def tree_peak_rss_mb(pid: int) -> float:
    """Sum of the peak resident sets (VmHWM): pages shared between workers count twice."""
    return round(sum(_proc_status_mb(p, "VmHWM") or 0.0 for p in process_tree(pid)), 1)


def server_stack(loop: str, http: str) -> dict[str, str]:
    """uvicorn's choices made explicit: ``auto`` takes uvloop / httptools when installed."""

    def have(module: str) -> bool:
        return importlib.util.find_spec(module) is not None

    return {
        "loop": ("uvloop" if have("uvloop") else "asyncio") if loop == "auto" else loop,
        "http": ("httptools" if have("httptools") else "h11") if http == "auto" else http,
    }


def uvicorn_args(stack: dict[str, str]) -> list[str]:
    return ["--loop", stack["loop"], "--http", stack["http"]]


def served_routes(base: str) -> set[tuple[str, str]]:
    """(method, path with parameters as {}) of every operation in the OpenAPI document."""
    paths = httpx.get(f"{base}/openapi.json", timeout=30).raise_for_status().json()["paths"]
    return {
        (method.upper(), re.sub(r"\{[^}]*\}", "{}", path))
        for path, operations in paths.items()
        for method in operations
    }


def wait_ready(base: str, key: str, seconds: float = 60.0) -> None:
    response = httpx.get(
        f"{base}/readyz", headers={"Authorization": f"Bearer {key}"}, timeout=seconds
    )
    if response.status_code != 200:
        raise RuntimeError(f"/readyz answered {response.status_code}: {response.text[:500]}")
