// Runs the pure helpers of the map page (the TM object in service/api/static/map.html)
// under node, on the cases read as JSON from stdin, and prints their results as JSON.
// Used by tests/api/test_map_page.py, which makes the cases and checks the answers.
"use strict";
const fs = require("fs");
const vm = require("vm");

const html = fs.readFileSync(process.argv[2], "utf8");
const script = /<script>([\s\S]*?)<\/script>/.exec(html)[1];
// No document in the sandbox: the page's script exports TM instead of starting.
const sandbox = { module: { exports: {} }, URLSearchParams };
vm.runInNewContext(script, sandbox, { filename: "map.html<script>" });
const TM = sandbox.module.exports;

const input = JSON.parse(fs.readFileSync(0, "utf8"));
const out = {
  keys: input.hashes.map((h) => TM.readKey(h)),
  collections: input.searches.map((s) => TM.readCollection(s)),
  labels: input.groups.map((g) => TM.groupLabel(g)),
  colours: Array.from({ length: input.colours }, (_, r) => TM.groupColour(r)),
  no_group_colour: TM.groupColour(-1),
  // The bytes of a packed pixel as they lie in ImageData (R, G, B, A).
  packed_bytes: Array.from(new Uint8Array(Uint32Array.of(TM.packColour("#2f6690")).buffer)),
  errors: input.errors.map((e) => TM.errorText(e)),
};

out.layouts = input.maps.map((m) => {
  const started = process.hrtime.bigint();
  const lay = TM.layout(m.points, m.components);
  const ms = Number(process.hrtime.bigint() - started) / 1e6;
  return {
    ms,
    X: Array.from(lay.X),
    Y: Array.from(lay.Y),
    placed: Array.from(lay.placed),
    unplaced: lay.unplaced,
    bounds: lay.bounds,
    boxes: lay.boxes.map((b) => ({ component: b.component, size: b.size, x: b.x, y: b.y, w: b.w, h: b.h })),
    drafts: m.drafts.map(([c, x, y]) => TM.toWorld(lay.byComponent.get(c), x, y)),
  };
});

const g = input.grid;
const SX = Float32Array.from(g.points.map((p) => p[0]));
const SY = Float32Array.from(g.points.map((p) => p[1]));
const visible = Uint8Array.from(g.points.map(() => 1));
const grid = TM.buildGrid(SX, SY, visible, g.width, g.height, g.cell);
out.nearest = g.queries.map(([x, y, r]) => TM.nearest(grid, SX, SY, x, y, r));

process.stdout.write(JSON.stringify(out));
