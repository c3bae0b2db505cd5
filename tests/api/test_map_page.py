"""The map page (GET /ui/map): served without a key, self-contained, package data.

The page's script is checked with node where node is installed: its syntax, and its pure
helpers (key from the fragment, component layout, hover lookup) on cases made here.
"""

from __future__ import annotations

import base64
import fnmatch
import hashlib
import json
import math
import re
import shutil
import subprocess
import tomllib
from importlib.resources import files
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.api.routes.map_page import map_page
from tests.factories import TestClient

ROOT = Path(__file__).resolve().parents[2]
HARNESS = Path(__file__).with_name("map_page_logic.js")
NODE = shutil.which("node")
needs_node = pytest.mark.skipif(NODE is None, reason="node is not installed")


def _page() -> str:
    return map_page()[0]


def _blocks(html: str, tag: str) -> list[str]:
    return re.findall(rf"<{tag}>(.*?)</{tag}>", html, re.DOTALL)


def _script() -> str:
    (script,) = _blocks(_page(), "script")
    return script


# --- served ---------------------------------------------------------------------------


def test_page_is_served_as_html_without_a_key(client: TestClient) -> None:
    response = client.get("/ui/map", params={"collection": "harrowvale-herald"})
    assert response.status_code == 200, response.text[:300]
    assert response.headers["content-type"] == "text/html; charset=utf-8"
    assert response.text == _page()
    assert "<canvas" in response.text
    assert "Tidemap — " in response.text


def test_page_policy_allows_only_its_own_script_and_style(client: TestClient) -> None:
    response = client.get("/ui/map")
    policy = dict(
        part.strip().split(" ", 1)
        for part in response.headers["content-security-policy"].split(";")
    )
    assert policy["default-src"] == "'none'"
    assert policy["connect-src"] == "'self'"
    for tag in ("script", "style"):
        (block,) = _blocks(response.text, tag)
        digest = base64.b64encode(hashlib.sha256(block.encode()).digest()).decode()
        assert policy[f"{tag}-src"] == f"'sha256-{digest}'"
    assert response.headers["referrer-policy"] == "no-referrer"


def test_page_is_not_part_of_the_api_schema(client: TestClient) -> None:
    # The auth walker (test_auth.py) covers the schema's routes, which all need a key.
    assert "/ui/map" not in client.app.openapi()["paths"]  # type: ignore[attr-defined]


# --- self-contained, key from the fragment -------------------------------------------


def test_page_loads_nothing_from_outside() -> None:
    html = _page()
    assert not re.search(r"\b(?:https?|wss?|ftp|file):", html, re.IGNORECASE)
    assert not re.search(r"""["'(]\s*//[\w.-]""", html)  # no protocol-relative URLs
    assert not re.search(r"\ssrc\s*=", html, re.IGNORECASE)  # no external script or image
    assert re.findall(r"<link\b[^>]*>", html) == ['<link rel="icon" href="data:,">']
    assert "@import" not in html and "url(" not in html
    assert "<iframe" not in html and "import(" not in _script()


def test_page_markup_has_no_inline_handlers() -> None:
    # The policy blocks inline handlers, so one would silently do nothing.
    markup = re.sub(r"<(script|style)>.*?</\1>", "", _page(), flags=re.DOTALL)
    assert not re.search(r"\son[a-z]+\s*=", markup, re.IGNORECASE)
    assert not re.search(r"\sstyle\s*=", markup, re.IGNORECASE)


def test_page_takes_the_key_from_the_fragment_and_stores_nothing() -> None:
    script = _script()
    assert "TM.readKey(location.hash)" in script
    assert '"Bearer " + key' in script
    for storage in ("localStorage", "sessionStorage", "document.cookie", "indexedDB"):
        assert storage not in script
    assert "innerHTML" not in script  # titles come from the archive: text only


def test_page_calls_the_api_paths_it_is_coded_against() -> None:
    script = _script()
    assert '"map?dims=2&format=json"' in script
    assert '"/neighbors?k=10"' in script
    assert '"similar", { json: { text, title: title || null, k: 10 } }' in script
    assert 'new URL("../v1/", location.href)' in script  # /ui/map -> /v1/...


def test_the_api_serves_the_paths_the_page_calls(client: TestClient) -> None:
    paths = client.app.openapi()["paths"]  # type: ignore[attr-defined]
    wanted = {
        "/v1/collections/{collection}/documents/{document_id}/neighbors": "get",
        "/v1/collections/{collection}/similar": "post",
        "/v1/collections/{collection}/map": "get",
    }
    missing = [p for p, method in wanted.items() if method not in paths.get(p, {})]
    if missing == ["/v1/collections/{collection}/map"]:
        pytest.skip("the map endpoint is not served yet")
    assert not missing


# --- package data ---------------------------------------------------------------------


def test_page_is_read_through_importlib_resources() -> None:
    resource = files("service.api") / "static" / "map.html"
    assert resource.is_file()
    assert resource.read_text(encoding="utf-8") == _page()


def test_every_data_file_of_the_package_is_declared_package_data() -> None:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    declared: dict[str, list[str]] = config["tool"]["setuptools"]["package-data"]
    data_files = [
        p.relative_to(ROOT).as_posix()
        for p in (ROOT / "service").rglob("*")
        if p.is_file() and p.suffix not in {".py", ".pyc"} and "__pycache__" not in p.parts
    ]
    assert "service/api/static/map.html" in data_files

    def covered(path: str) -> bool:
        for package, globs in declared.items():
            prefix = package.replace(".", "/") + "/"
            if path.startswith(prefix) and any(
                fnmatch.fnmatch(path[len(prefix) :], g) for g in globs
            ):
                return True
        return False

    assert [p for p in data_files if not covered(p)] == []


# --- the script, under node -----------------------------------------------------------


@needs_node
def test_page_script_is_valid_javascript(tmp_path: Path) -> None:
    source = tmp_path / "map.js"
    source.write_text(_script(), encoding="utf-8")
    done = subprocess.run(
        [NODE or "node", "--check", str(source)], capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 0, done.stderr


def _component_points(
    rng: np.random.Generator, component: int, n: int, scale: tuple[float, float]
) -> list[dict[str, Any]]:
    xy = rng.normal(size=(n, 2)) * np.array(scale)
    return [
        {
            "id": f"c{component}-{i}",
            "title": f"doc {component}-{i}",
            "group": component,
            "component": component,
            "provisional": False,
            "coords": [float(x), float(y)],
        }
        for i, (x, y) in enumerate(xy)
    ]


def _isolated(n: int) -> list[dict[str, Any]]:
    return [
        {"id": f"iso-{i}", "title": "alone", "group": None, "component": None}
        | {"provisional": False, "coords": None}
        for i in range(n)
    ]


def _run_helpers(cases: dict[str, Any]) -> dict[str, Any]:
    done = subprocess.run(
        [NODE or "node", str(HARNESS), str(files("service.api") / "static" / "map.html")],
        input=json.dumps(cases),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    return dict(json.loads(done.stdout))


def _small_map(rng: np.random.Generator) -> dict[str, Any]:
    points = (
        _component_points(rng, 0, 60, (2e-3, 1e-3))
        + _component_points(rng, 1, 25, (5e-2, 4e-3))  # elongated: aspect clamped
        + _component_points(rng, 2, 1, (1.0, 1.0))  # one document: no extent
        + _isolated(3)
    )
    # A document of a component without coordinates is not plotted either.
    points.append(points[0] | {"id": "no-coords", "coords": None})
    rng.shuffle(points)  # type: ignore[arg-type]
    components = [{"component": 1, "size": 25}, {"component": 2, "size": 1}]
    components += [{"component": 0, "size": 61}, {"component": 7, "size": 0}]
    drafts = [[p["component"], *p["coords"]] for p in points if p["coords"]][:5]
    return {"points": points, "components": components, "drafts": drafts}


def _big_map(rng: np.random.Generator) -> dict[str, Any]:
    sizes = [60_000, 30_000, 9_000, 900, 100]
    points = [p for c, n in enumerate(sizes) for p in _component_points(rng, c, n, (1e-2, 1e-2))]
    points += _isolated(10)
    components = [{"component": c, "size": n} for c, n in enumerate(sizes)]
    return {"points": points, "components": components, "drafts": []}


def _check_layout(case: dict[str, Any], lay: dict[str, Any]) -> None:
    points = case["points"]
    X, Y, placed = np.array(lay["X"]), np.array(lay["Y"]), np.array(lay["placed"], dtype=bool)
    plotted = np.array([p["coords"] is not None and p["component"] is not None for p in points])
    assert np.array_equal(placed, plotted)
    assert lay["unplaced"] == int((~plotted).sum())

    boxes = lay["boxes"]
    sizes = [b["size"] for b in boxes]
    assert sizes == sorted(sizes, reverse=True), "largest component first"
    assert (boxes[0]["x"], boxes[0]["y"]) == (0, 0)
    with_points = {p["component"] for p in points if p["coords"] is not None}
    assert {b["component"] for b in boxes} == with_points - {None}
    for a in range(len(boxes)):  # side by side: no two boxes overlap
        for b in range(a + 1, len(boxes)):
            p, q = boxes[a], boxes[b]
            apart = (
                p["x"] + p["w"] <= q["x"]
                or q["x"] + q["w"] <= p["x"]
                or p["y"] + p["h"] <= q["y"]
                or q["y"] + q["h"] <= p["y"]
            )
            assert apart, (p, q)

    box_of = {b["component"]: b for b in boxes}
    component = np.array([-1 if p["component"] is None else p["component"] for p in points])
    eps = 1e-9 * max(lay["bounds"]["x1"], lay["bounds"]["y1"])
    for c, box in box_of.items():
        members = np.flatnonzero(placed & (component == c))
        x, y = X[members], Y[members]
        assert np.all(x >= box["x"] - eps) and np.all(x <= box["x"] + box["w"] + eps)
        assert np.all(y >= box["y"] - eps) and np.all(y <= box["y"] + box["h"] + eps)
        if members.size < 2:
            continue
        # One uniform scale per component (diffusion distances keep their ratios), and
        # the data's y axis points up on the screen.
        coords = np.array([points[i]["coords"] for i in members])
        i, j = members[0], members[1:]
        world = np.hypot(X[j] - X[i], Y[j] - Y[i])
        data = np.hypot(*(coords[1:] - coords[0]).T)
        np.testing.assert_allclose(world / data, world[0] / data[0], rtol=1e-9)
        top, bottom = np.argmax(coords[:, 1]), np.argmin(coords[:, 1])
        assert Y[members[top]] < Y[members[bottom]]


@needs_node
def test_page_helpers() -> None:
    rng = np.random.default_rng(7)
    small, big = _small_map(rng), _big_map(rng)
    grid_points = rng.uniform(0, 400, size=(3000, 2))
    queries = np.column_stack([rng.uniform(-5, 405, size=(200, 2)), np.full(200, 6.0)])
    errors = [
        {"status": 409, "code": "no_index", "message": "collection 'x' has no index yet"},
        {"status": 422, "code": "invalid_input", "message": "bad"}
        | {"details": [{"field": "body.k", "problem": "too large"}]},
        {"status": 401, "code": "unauthenticated", "message": "no key", "details": None},
    ]
    groups = [
        {"id": 3, "name": "Harbour works", "size": 9, "label_terms": ["quay", "tide"]},
        {"id": 4, "name": None, "size": 5, "label_terms": ["bus", "route", "fare", "depot"]},
        {"id": 5, "name": None, "size": 2, "label_terms": []},
    ]
    cases = {
        "hashes": ["#key=tdm_Ab-9_x", "#other=1&key=k2", "#key=a%2Bb", "", "#key=", "#x=1"],
        "searches": ["?collection=harrowvale-herald", "?x=1", "", "?collection=a%20b"],
        "groups": groups,
        "colours": 40,
        "errors": errors,
        "maps": [small, big],
        "grid": {
            "points": grid_points.tolist(),
            "width": 400,
            "height": 400,
            "cell": 8,
            "queries": queries.tolist(),
        },
    }
    out = _run_helpers(cases)

    assert out["keys"] == ["tdm_Ab-9_x", "k2", "a+b", None, None, None]
    assert out["collections"] == ["harrowvale-herald", None, None, "a b"]
    assert out["labels"] == ["Harbour works", "bus · route · fare", "group 5"]
    assert len(set(out["colours"])) == 40 and out["no_group_colour"] not in out["colours"]
    assert all(re.fullmatch(r"#[0-9a-f]{6}", c) for c in out["colours"])
    assert out["packed_bytes"] == [0x2F, 0x66, 0x90, 0xFF]
    no_index, invalid, unauthenticated = out["errors"]
    assert no_index.startswith("409 no_index: collection 'x' has no index yet")
    assert "body.k: too large" in invalid
    assert "#key=" in unauthenticated

    small_lay, big_lay = out["layouts"]
    _check_layout(small, small_lay)
    _check_layout(big, big_lay)
    assert big_lay["unplaced"] == 10
    # A draft's coordinates land exactly where a document with the same ones is drawn.
    index = {tuple(p["coords"]): i for i, p in enumerate(small["points"]) if p["coords"]}
    for (_, x, y), world in zip(small["drafts"], small_lay["drafts"], strict=True):
        i = index[(x, y)]
        assert world == pytest.approx([small_lay["X"][i], small_lay["Y"][i]], rel=1e-12)

    for (x, y, r), found in zip(queries, out["nearest"], strict=True):
        d = np.hypot(*(grid_points - [x, y]).T)
        if d.min() > r:
            assert found == -1
        else:
            # The page keeps screen positions as float32.
            assert math.isclose(d[found], d.min(), abs_tol=1e-3)


SMOKE = Path(__file__).with_name("map_page_smoke.js")


def _smoke_map() -> dict[str, Any]:
    rng = np.random.default_rng(3)
    points = _component_points(rng, 0, 30, (1e-2, 5e-3)) + _component_points(rng, 1, 8, (1, 1))
    points[3]["provisional"] = True
    points += _isolated(2)
    return {
        "collection": "harrowvale-herald",
        "version": 3,
        "t": 1.0,
        "dims": 2,
        "components": [{"component": 0, "size": 30}, {"component": 1, "size": 8}],
        "groups": [
            {"id": 0, "name": None, "size": 30, "label_terms": ["quay", "tide", "boat", "pier"]},
            {"id": 1, "name": "Buses", "size": 8, "label_terms": ["bus"]},
        ],
        "points": points,
    }


def _smoke(scenario: str, answer: dict[str, Any]) -> dict[str, Any]:
    page = str(files("service.api") / "static" / "map.html")
    done = subprocess.run(
        [NODE or "node", str(SMOKE), page, scenario],
        input=json.dumps(answer),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    return dict(json.loads(done.stdout))


def _no_cases() -> dict[str, Any]:
    grid = {"points": [], "width": 1, "height": 1, "cell": 8, "queries": []}
    return {"hashes": [], "searches": [], "groups": [], "colours": 2, "errors": []} | {
        "maps": [],
        "grid": grid,
    }


@needs_node
def test_page_in_a_fake_browser() -> None:
    answer = _smoke_map()
    seen = _smoke("ok", answer)
    assert seen["title"] == "Tidemap — harrowvale-herald"
    first, neighbors, similar = seen["requests"]
    base = "http://127.0.0.1:8000/v1/collections/harrowvale-herald/"
    assert first["url"] == base + "map?dims=2&format=json"
    for request in seen["requests"]:
        assert request["url"].startswith(base)
        assert request["headers"]["Authorization"] == "Bearer tdm_test-key"
    assert seen["bar_hidden"] and seen["key_section_hidden"]
    assert "40 documents · 38 plotted in 2 components · 2 isolated (not plotted)" in seen["footer"]
    assert "1 provisional" in seen["footer"]
    assert seen["groups"] == 2
    # Both groups are drawn, each in its own colour: the first two of the palette.
    palette = _run_helpers(_no_cases())["colours"]
    assert set(seen["pixels"]) == set(palette[:2]), seen["pixels"]

    # Hover shows a title; clicking there selects that document and asks for its neighbours.
    hovered_title = seen["hover"][0]
    (doc,) = [p for p in answer["points"] if p["title"] == hovered_title]
    assert seen["subject"] == ["Selected document", hovered_title, False]
    assert neighbors["url"] == base + f"documents/{doc['id']}/neighbors?k=10"
    assert seen["related"] == 4 and seen["rings"] >= 4
    assert seen["group_active"]

    text = "The harbour board met about the new quay."
    assert (similar["method"], json.loads(similar["body"])) == (
        "POST",
        {"text": text, "title": None, "k": 10},
    )
    assert seen["draft"] == ["Draft", "lands in component 0 (marked +)", 4]
    assert seen["draft_marked"]
    hidden, kind, message = seen["bar_after"]
    assert (hidden, kind) == (False, "note") and "version 3 → 4" in message
    assert seen["redrawn"] and seen["subject_after_drag"] == "Draft"  # a drag selects nothing


@needs_node
def test_page_shows_api_errors_in_the_bar() -> None:
    seen = _smoke("no_index", _smoke_map())
    assert (seen["bar_hidden"], seen["bar_class"]) == (False, "error")
    assert seen["bar"] == "409 no_index: collection 'harrowvale-herald' has no index yet"
    assert seen["groups"] == 0


@needs_node
def test_page_without_a_key_asks_for_one_and_calls_nothing() -> None:
    seen = _smoke("no_key", _smoke_map())
    assert seen["requests"] == []
    assert not seen["key_section_hidden"]
    assert "#key=" in seen["bar"]
