// Runs the whole map page (service/api/static/map.html) under node with a tiny fake DOM,
// canvas and fetch, drives it (load, hover, click, group, draft), and prints what it saw
// as JSON. Used by tests/api/test_map_page.py; argv: page path, scenario (ok, no_index,
// no_key). The map answer comes as JSON on stdin.
"use strict";
const fs = require("fs");
const vm = require("vm");

const [pagePath, scenario] = process.argv.slice(2);
const html = fs.readFileSync(pagePath, "utf8");
const script = /<script>([\s\S]*?)<\/script>/.exec(html)[1];
const mapAnswer = JSON.parse(fs.readFileSync(0, "utf8"));

const drawn = {};
let lastImage = null;
const canvasApi = {
  createImageData: (w, h) => ({ width: w, height: h, data: new Uint8ClampedArray(w * h * 4) }),
  putImageData: (image) => { lastImage = image; drawn.putImageData = (drawn.putImageData || 0) + 1; },
};
// Pixels by colour ("#rrggbb") of the last image put on the canvas, white left out.
function pixelColours() {
  const counts = {};
  if (!lastImage) return counts;
  const d = lastImage.data;
  for (let p = 0; p < d.length; p += 4) {
    const hex = "#" + [d[p], d[p + 1], d[p + 2]].map((v) => v.toString(16).padStart(2, "0")).join("");
    if (hex !== "#ffffff") counts[hex] = (counts[hex] || 0) + 1;
  }
  return counts;
}
const ctx = new Proxy(canvasApi, {
  get(target, name) {
    if (name in target) return target[name];
    return () => { drawn[name] = (drawn[name] || 0) + 1; };
  },
  set(target, name, value) { target[name] = value; return true; },
});

class FakeElement {
  constructor(id, tag) {
    this.id = id; this.tagName = tag; this.children = []; this.listeners = {};
    this.style = {}; this.dataset = {}; this.hidden = false; this.textContent = "";
    this.className = ""; this.value = ""; this.title = ""; this.href = "";
    this.offsetWidth = 120; this.offsetHeight = 30; this.clientWidth = 800; this.clientHeight = 600;
    const classes = new Set();
    this.classList = {
      add: (c) => classes.add(c), remove: (c) => classes.delete(c),
      toggle: (c, on) => (on ? classes.add(c) : classes.delete(c)), contains: (c) => classes.has(c),
    };
  }
  addEventListener(type, fn) { (this.listeners[type] = this.listeners[type] || []).push(fn); }
  fire(type, event) {
    for (const fn of this.listeners[type] || []) fn({ preventDefault() {}, pointerId: 1, ...event });
  }
  replaceChildren(...nodes) { this.children = nodes; }
  append(...nodes) { this.children.push(...nodes); }
  setPointerCapture() {}
  getContext() { return ctx; }
}

// Elements start hidden where the page's markup says so.
const hiddenAtStart = new Set([...html.matchAll(/<[^>]*\sid="([\w-]+)"[^>]*\shidden[\s>]/g)].map((m) => m[1]));
const elements = {};
const byId = (id) => {
  if (!elements[id]) {
    elements[id] = new FakeElement(id, "div");
    elements[id].hidden = hiddenAtStart.has(id);
  }
  return elements[id];
};
const documentListeners = {};
const document = {
  title: "",
  getElementById: byId,
  createElement: (tag) => new FakeElement(null, tag),
  addEventListener: (type, fn) => { documentListeners[type] = fn; },
};
const hash = scenario === "no_key" ? "" : "#key=tdm_test-key";
const location = {
  hash,
  search: "?collection=harrowvale-herald",
  href: "http://127.0.0.1:8000/ui/map?collection=harrowvale-herald" + hash,
  reload() {},
};

const requests = [];
function answer(status, body) {
  return { ok: status < 400, status, statusText: "", text: async () => JSON.stringify(body) };
}
async function fetch(url, init) {
  const u = new URL(String(url));
  requests.push({ url: String(url), method: init.method, headers: init.headers, body: init.body || null });
  if (u.pathname.endsWith("/map")) {
    if (scenario === "no_index") {
      return answer(409, { error: { code: "no_index", message: "collection 'harrowvale-herald' has no index yet", details: null } });
    }
    return answer(200, mapAnswer);
  }
  const related = mapAnswer.points.filter((p) => p.coords).slice(0, 4).map((p) => ({
    id: p.id, title: p.title, distance: 0.01, bound: 0.001, cosine: 0.5, provisional: false,
  }));
  if (u.pathname.endsWith("/neighbors")) {
    return answer(200, { collection: "harrowvale-herald", version: mapAnswer.version, t: 1, document: {}, neighbors: related });
  }
  if (u.pathname.endsWith("/similar")) {
    const first = mapAnswer.points.find((p) => p.coords);
    return answer(200, {
      collection: "harrowvale-herald", version: mapAnswer.version + 1, t: 1,
      component: first.component, coords: [...first.coords, 0.5], neighbors: related,
    });
  }
  return answer(404, { error: { code: "not_found", message: "no route", details: null } });
}

let frames = [];
const sandbox = {
  document, location, fetch, URL, URLSearchParams, console,
  window: { devicePixelRatio: 1, addEventListener() {} },
  requestAnimationFrame: (fn) => frames.push(fn),
  ResizeObserver: class { constructor(fn) { this.fn = fn; } observe() {} },
};
const settle = async () => {
  for (let round = 0; round < 5; round++) {
    await new Promise((r) => setImmediate(r));
    const now = frames; frames = [];
    for (const fn of now) fn();
  }
};
const text = (id) => byId(id).textContent;

(async () => {
  vm.runInNewContext(script, sandbox, { filename: "map.html<script>" });
  await settle();
  const seen = {
    title: document.title,
    bar_hidden: byId("bar").hidden, bar_class: byId("bar").className, bar: text("bar-msg"),
    key_section_hidden: byId("key-section").hidden,
    footer: text("footer"), groups: byId("groups").children.length,
    pixels: pixelColours(),
  };
  if (scenario === "ok") {
    const canvas = byId("canvas"), tip = byId("tip");
    tip.hidden = true;
    let spot = null;
    for (let y = 0; y < 600 && !spot; y += 2) {
      for (let x = 0; x < 800 && !spot; x += 2) {
        canvas.fire("pointermove", { offsetX: x, offsetY: y });
        if (!tip.hidden) spot = [x, y];
      }
    }
    seen.hover = spot && tip.children.map((c) => c.textContent);
    canvas.fire("pointerdown", { offsetX: spot[0], offsetY: spot[1] });
    canvas.fire("pointerup", { offsetX: spot[0], offsetY: spot[1] });
    await settle();
    seen.subject = [text("subject-kind"), text("subject-title"), byId("subject").hidden];
    seen.related = byId("related").children.length;
    seen.rings = drawn.strokeRect || 0;
    const group = byId("groups").children[0];
    group.fire("click", {});
    await settle();
    seen.group_active = group.classList.contains("active");
    byId("draft-text").value = "The harbour board met about the new quay.";
    byId("draft-form").fire("submit", {});
    await settle();
    seen.draft = [text("subject-kind"), text("subject-sub"), byId("related").children.length];
    seen.draft_marked = (drawn.arc || 0) > 0;
    seen.bar_after = [byId("bar").hidden, byId("bar").className, text("bar-msg")];
    // Drag pans: the next frame draws again, and no document gets selected.
    const before = drawn.putImageData;
    canvas.fire("pointerdown", { offsetX: 10, offsetY: 10 });
    canvas.fire("pointermove", { offsetX: 60, offsetY: 40 });
    canvas.fire("pointerup", { offsetX: 60, offsetY: 40 });
    canvas.fire("wheel", { offsetX: 400, offsetY: 300, deltaY: -200, deltaMode: 0 });
    await settle();
    seen.redrawn = drawn.putImageData > before;
    seen.subject_after_drag = text("subject-kind");
  }
  seen.requests = requests;
  process.stdout.write(JSON.stringify(seen));
})().catch((err) => { process.stderr.write(String(err && err.stack)); process.exit(1); });
