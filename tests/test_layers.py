"""The import rule of STYLE.md section 6, checked by parsing every module with ast."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "service"
# faiss: HNSW search over diffusion coordinates (service/geometry/coordinate_index.py).
THIRD_PARTY_PURE = {"numpy", "scipy", "sklearn", "threadpoolctl", "Stemmer", "faiss"}

# package -> the packages of ours it may import
ALLOWED: dict[str, set[str]] = {
    "text": {"text"},
    "geometry": {"geometry", "text"},
    "errors": set(),
    "config": set(),
    "storage": {"storage", "config", "errors"},
    "pipeline": {"pipeline", "text", "geometry", "storage", "errors", "config"},
    "api": {"api", "pipeline", "storage", "errors", "config"},
    "worker": {"worker", "pipeline", "storage", "errors", "config"},
    # For other applications: none of the server's code (tests/api/test_client.py checks
    # its third-party imports too).
    "client": {"client"},
}


# STYLE.md: the pure packages may share each other's types.
SHARED_TYPES = {"service.geometry.types"}


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module)
    return names


def _modules(package: str) -> list[Path]:
    base = ROOT / package
    return sorted(base.rglob("*.py")) if base.is_dir() else [ROOT / f"{package}.py"]


@pytest.mark.parametrize("package", sorted(ALLOWED))
def test_imports_point_down(package: str) -> None:
    bad = []
    for path in _modules(package):
        for name in _imports(path):
            parts = name.split(".")
            if name in SHARED_TYPES:
                continue
            if parts[0] == "service" and len(parts) > 1 and parts[1] not in ALLOWED[package]:
                bad.append(f"{path.relative_to(ROOT)} imports {name}")
    assert not bad, "\n".join(bad)


@pytest.mark.parametrize("package", ["text", "geometry"])
def test_pure_layers_import_only_numerics_and_stdlib(package: str) -> None:
    import sys

    stdlib = set(sys.stdlib_module_names)
    bad = []
    for path in _modules(package):
        for name in _imports(path):
            top = name.split(".")[0]
            if top not in stdlib and top not in THIRD_PARTY_PURE and top != "service":
                bad.append(f"{path.relative_to(ROOT)} imports {name}")
    assert not bad, "\n".join(bad)
