"""The live page: one HTML document with its own styles and script, nothing fetched from
elsewhere. The script asks the server for `state.json` every second and, when the run has
grown, updates the progress and verdict counts and reloads `plot.svg` (drawn by the server
with the report's Bode plot)."""

from __future__ import annotations

import html

POLL_INTERVAL_MS = 1000

_PAGE = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>sweeper watch: @TITLE@</title>
<style>
:root { --ink: #1b1b1b; --muted: #5a5a5a; --rule: #c9c9c9; --bar: #0072B2; --pass: #00795a; --passu: #4d6b00;
  --failu: #8a5200; --fail: #a63f00; }
* { box-sizing: border-box; }
body { font-family: system-ui, "Segoe UI", "Helvetica Neue", Arial, sans-serif; color: var(--ink); margin: 0 auto;
  max-width: 70rem; padding: .8rem 1.2rem 2rem; line-height: 1.35; font-size: 14px; background: #fff; }
h1 { font-size: 1.3rem; margin: 0 0 .2rem; }
.muted { color: var(--muted); }
.row { display: flex; flex-wrap: wrap; gap: .4rem 1.4rem; align-items: center; margin: .5rem 0; }
.progress { flex: 1 1 18rem; height: 1.1rem; border: 1px solid var(--rule); border-radius: 3px; background: #f4f6f8;
  overflow: hidden; min-width: 12rem; }
.progress > div { height: 100%; width: 0; background: repeating-linear-gradient(45deg, var(--bar), var(--bar) 8px,
  #2b85c0 8px, #2b85c0 16px); }
#count { font-weight: 600; font-variant-numeric: tabular-nums; }
#status { font-weight: 600; }
#status.lost { color: var(--fail); }
ul.verdicts { list-style: none; padding: 0; margin: 0; display: flex; gap: .3rem .9rem; flex-wrap: wrap; }
ul.verdicts li { font-variant-numeric: tabular-nums; }
ul.verdicts .v-PASS { color: var(--pass); } ul.verdicts .v-PASS\\? { color: var(--passu); }
ul.verdicts .v-FAIL\\? { color: var(--failu); } ul.verdicts .v-FAIL { color: var(--fail); font-weight: 600; }
figure { margin: .6rem 0 0; }
figure img { display: block; margin: 0 auto; max-width: 100%; max-height: calc(100vh - 8.5rem); height: auto;
  border: 1px solid var(--rule); }
</style></head>
<body>
<h1 id="title">@TITLE@</h1>
<div class="muted" id="subtitle">@SUBTITLE@</div>
<div class="row"><div class="progress" role="progressbar" aria-label="points measured"><div id="bar"></div></div>
<span id="count">waiting for the journal\u2026</span><span id="status"></span></div>
<div class="row"><ul class="verdicts" id="verdicts"></ul><span class="muted" id="last"></span></div>
<ul class="muted" id="interruptions"></ul>
<figure><img id="plot" src="plot.svg?v=0" alt="Bode plot of the run so far"></figure>
<script>
"use strict";
const POLL_MS = @POLL@;
let shown = -1;
function text(id, value) { document.getElementById(id).textContent = value; }
function fmt(x, digits) { return (x === null || x === undefined) ? "n/a" : Number(x).toPrecision(digits); }
function fmtHz(x) {
  if (x === null || x === undefined) { return "n/a"; }
  for (const [scale, prefix] of [[1e9, "G"], [1e6, "M"], [1e3, "k"]]) {
    if (Math.abs(x) >= scale) { return Number(x / scale).toPrecision(5) + " " + prefix + "Hz"; }
  }
  return Number(x).toPrecision(5) + " Hz";
}
function update(s) {
  const who = [s.board, s.serial].filter(Boolean).join(" ");
  text("title", who || s.run_id || "run");
  text("subtitle", "run " + s.run_id + (s.plan ? " \u00b7 plan " + s.plan : ""));
  text("count", s.points + " of " + s.planned + " points");
  document.getElementById("bar").style.width = (s.planned ? Math.min(100, 100 * s.points / s.planned) : 0) + "%";
  const status = document.getElementById("status");
  status.className = "";
  status.textContent = s.finished ? (s.status + (s.run_verdict ? ", verdict " + s.run_verdict : "")) : "running";
  if (s.error) { status.textContent += " (" + s.error + ")"; }
  const gaps = document.getElementById("interruptions");
  gaps.replaceChildren();
  for (const g of (s.interruptions || [])) {
    const li = document.createElement("li");
    li.textContent = "interrupted: last write " + g.interrupted_utc + ", resumed " + g.resumed_utc +
      ", gap " + fmt(g.gap_s, 4) + " s (" + g.reason + ")";
    gaps.appendChild(li);
  }
  const list = document.getElementById("verdicts");
  list.replaceChildren();
  for (const [label, n] of Object.entries(s.verdicts)) {
    if (!n) { continue; }
    const li = document.createElement("li");
    li.className = "v-" + label.replace(/ /g, "_");
    li.textContent = label + ": " + n;
    list.appendChild(li);
  }
  if (s.last && s.last.frequency_hz !== undefined) {
    text("last", "last point: " + fmtHz(s.last.frequency_hz) + ", " + fmt(s.last.gain_db, 5) + " dB, "
      + fmt(s.last.phase_deg, 5) + "\u00b0 " + s.last.verdict);
  }
  if (s.version !== shown) {
    shown = s.version;
    document.getElementById("plot").src = "plot.svg?v=" + s.version;
  }
}
async function poll() {
  try {
    const reply = await fetch("state.json", {cache: "no-store"});
    if (!reply.ok) { throw new Error("HTTP " + reply.status); }
    update(await reply.json());
  } catch (e) {
    const status = document.getElementById("status");
    status.className = "lost";
    status.textContent = "no answer from the sweeper watch server (" + e.message + ")";
  }
  setTimeout(poll, POLL_MS);
}
poll();
</script>
</body></html>
"""


def render_page(title: str, subtitle: str) -> str:
    """The live page; title and subtitle are escaped and replaced by the script's first update."""
    return (_PAGE.replace("@TITLE@", html.escape(title, quote=True))
            .replace("@SUBTITLE@", html.escape(subtitle, quote=True))
            .replace("@POLL@", str(POLL_INTERVAL_MS)))
