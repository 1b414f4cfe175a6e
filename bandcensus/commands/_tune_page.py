"""The tuning view as a local web page: a plain ``http.server`` on 127.0.0.1 in a thread.

``/`` is a small self-contained page, ``/tune.js``, ``/tune.css`` and ``/icon.svg`` its script,
style and icon, and
``/state.json`` the newest refresh (the same keys as ``--json`` plus the curves). The page polls
the state four times a second and redraws an SVG plot when a new refresh is there. Every response carries a strict Content
Security Policy (no inline script or style, nothing from other origins) and ``nosniff``; nothing
is loaded from anywhere else.
"""

from __future__ import annotations

import json
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; connect-src 'self'; img-src 'self'; "
       "base-uri 'none'; form-action 'none'; frame-ancestors 'none'")

PAGE_HTML = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>bandcensus tune</title>
<link rel="stylesheet" href="/tune.css"><link rel="icon" href="/icon.svg" type="image/svg+xml"></head>
<body><h1>Preamp alignment <span id="sim"></span></h1>
<svg id="plot" viewBox="0 0 900 420" role="img" aria-label="gain against frequency"></svg>
<p class="legend"><span class="now">&#9632; now</span> <span class="best">&#9632; best so far</span>
<span class="target">&#9632; target</span> <span class="edge">| -3 dB edges</span></p>
<table id="measures"><tbody>
<tr><th>refresh</th><td id="refresh">waiting</td></tr>
<tr><th>peak</th><td id="peak"></td></tr>
<tr><th>-3 dB edges</th><td id="edges"></td></tr>
<tr><th>target within 3 dB</th><td id="fraction"></td></tr>
<tr><th>best so far</th><td id="best"></td></tr>
<tr><th>stations in the passband</th><td id="stations"></td></tr>
<tr><th>hint</th><td id="hint"></td></tr>
</tbody></table>
<script src="/tune.js"></script></body></html>
"""

PAGE_ICON = """<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 16 16"><path d="M1 14 Q8 -6 15 14" fill="none" stroke="#c60" stroke-width="2"/></svg>"""

PAGE_CSS = """body{font-family:sans-serif;margin:1em;background:#fff;color:#222}
h1{font-size:1.3em} #sim{color:#a40;font-size:.8em}
svg{width:100%;max-width:900px;border:1px solid #ccc;background:#fcfcfc}
.legend span{margin-right:1.5em} .now{color:#c60} .best{color:#38a} .target{color:#8c8} .edge{color:#c00}
table{border-collapse:collapse;margin-top:.8em} th{text-align:left;padding-right:1em;font-weight:normal;color:#555}
td{font-variant-numeric:tabular-nums}
"""

PAGE_JS = """'use strict';
const NS = 'http://www.w3.org/2000/svg';
const W = 900, H = 420, L = 60, R = 20, T = 15, B = 40;
function el(name, attrs, text) {
  const e = document.createElementNS(NS, name);
  for (const k in attrs) e.setAttribute(k, attrs[k]);
  if (text !== undefined) e.textContent = text;
  return e;
}
function mhz(hz, d) { return (hz === null || hz === undefined) ? 'beyond span' : (hz / 1e6).toFixed(d) + ' MHz'; }
function setText(id, text) { document.getElementById(id).textContent = text; }
function path(fs, gs, x, y) {
  let d = '', pen = false;
  for (let i = 0; i < fs.length; i++) {
    if (gs[i] === null) { pen = false; continue; }
    d += (pen ? 'L' : 'M') + x(fs[i]).toFixed(1) + ' ' + y(gs[i]).toFixed(1);
    pen = true;
  }
  return d;
}
function draw(s) {
  const svg = document.getElementById('plot');
  while (svg.firstChild) svg.removeChild(svg.firstChild);
  const fs = s.freqs_hz, gs = s.gain_db;
  if (!fs || fs.length < 2) return;
  const f0 = fs[0], f1 = fs[fs.length - 1];
  let top = -1e9;
  for (const v of gs.concat(s.best_gain_db || [])) if (v !== null && v > top) top = v;
  top = Math.ceil(top + 1); const bottom = top - 20;
  const x = f => L + (f - f0) / (f1 - f0) * (W - L - R);
  const y = g => T + (top - Math.max(bottom, Math.min(top, g))) / (top - bottom) * (H - T - B);
  if (s.target_hz) svg.appendChild(el('rect', {x: x(s.target_hz[0]), y: T, width: x(s.target_hz[1]) - x(s.target_hz[0]),
    height: H - T - B, fill: '#e4f4e4'}));
  for (let g = top; g >= bottom; g -= 2) {
    svg.appendChild(el('line', {x1: L, x2: W - R, y1: y(g), y2: y(g), stroke: '#e5e5e5'}));
    svg.appendChild(el('text', {x: L - 6, y: y(g) + 4, 'text-anchor': 'end', 'font-size': 11}, g + ' dB'));
  }
  for (let f = Math.ceil(f0 / 1e6); f <= f1 / 1e6; f += 1) {
    svg.appendChild(el('text', {x: x(f * 1e6), y: H - B + 16, 'text-anchor': 'middle', 'font-size': 11}, String(f)));
  }
  svg.appendChild(el('text', {x: W - R, y: H - 6, 'text-anchor': 'end', 'font-size': 11}, 'MHz'));
  const dots = s.input === 'antenna';
  if (s.best_gain_db) svg.appendChild(el('path', {d: path(s.best_freqs_hz, s.best_gain_db, x, y), fill: 'none',
    stroke: '#38a', 'stroke-width': 1.5, 'stroke-dasharray': '4 3'}));
  svg.appendChild(el('path', {id: 'now', d: path(fs, gs, x, y), fill: 'none', stroke: '#c60', 'stroke-width': 2.5}));
  if (dots) for (let i = 0; i < fs.length; i++) if (gs[i] !== null)
    svg.appendChild(el('circle', {cx: x(fs[i]), cy: y(gs[i]), r: 4, fill: '#c60'}));
  if (s.peak_gain_db !== null) {
    const lvl = s.peak_gain_db - 3.01;
    svg.appendChild(el('line', {x1: L, x2: W - R, y1: y(lvl), y2: y(lvl), stroke: '#c00', 'stroke-dasharray': '2 4'}));
    for (const e of [s.edge_low_hz, s.edge_high_hz]) if (e !== null)
      svg.appendChild(el('line', {class: 'edge', x1: x(e), x2: x(e), y1: T, y2: H - B, stroke: '#c00'}));
  }
}
function show(s) {
  setText('sim', s.simulated ? 'SIMULATED' : '');
  setText('refresh', s.refresh + ' at ' + s.t_s.toFixed(1) + ' s' +
    (s.refresh_rate_hz ? ', ' + s.refresh_rate_hz.toFixed(2) + ' refreshes/s' : ''));
  setText('peak', s.peak_hz === null ? 'none' : mhz(s.peak_hz, 3) + ', gain ' + s.peak_gain_db.toFixed(1) + ' dB');
  setText('edges', mhz(s.edge_low_hz, 2) + ' .. ' + mhz(s.edge_high_hz, 2) +
    (s.width_hz === null ? '' : ', width ' + (s.width_hz / 1e6).toFixed(2) + ' MHz'));
  setText('fraction', s.target_within_3db_fraction === null ? '' : (100 * s.target_within_3db_fraction).toFixed(0) + ' %');
  setText('best', s.best_fraction === null ? '' : (100 * s.best_fraction).toFixed(0) + ' % within 3 dB at ' + s.best_t_s.toFixed(1) + ' s');
  setText('stations', s.input === 'antenna' ? (s.stations_inside_hz.map(f => (f / 1e6).toFixed(1)).join(', ') || 'none') : 'noise input');
  setText('hint', s.hint || '');
  draw(s);
}
let shown = 0;
async function poll() {
  try {
    const r = await fetch('/state.json', {cache: 'no-store'});
    if (r.ok) { const s = await r.json(); if (s.refresh && s.refresh !== shown) { shown = s.refresh; show(s); } }
  } catch (e) { setText('refresh', 'session ended'); }
  setTimeout(poll, 250);
}
poll();
"""


class TunePageServer:
    """Serves the page on ``127.0.0.1:port`` (0: any free port) from a daemon thread."""

    def __init__(self, port: int = 0):
        self._state = json.dumps({"refresh": 0}).encode()
        self._lock = threading.Lock()
        server = self

        class Handler(BaseHTTPRequestHandler):
            def do_GET(self):  # noqa: N802 (http.server's name)
                path = self.path.split("?", 1)[0]
                if path == "/state.json":
                    with server._lock:
                        body, kind = server._state, "application/json"
                elif path in ("/", "/index.html"):
                    body, kind = PAGE_HTML.encode(), "text/html; charset=utf-8"
                elif path == "/tune.js":
                    body, kind = PAGE_JS.encode(), "text/javascript; charset=utf-8"
                elif path == "/tune.css":
                    body, kind = PAGE_CSS.encode(), "text/css; charset=utf-8"
                elif path == "/icon.svg":
                    body, kind = PAGE_ICON.encode(), "image/svg+xml"
                else:
                    self.send_error(404)
                    return
                self.send_response(200)
                self.send_header("Content-Type", kind)
                self.send_header("Content-Length", str(len(body)))
                self.send_header("Content-Security-Policy", CSP)
                self.send_header("X-Content-Type-Options", "nosniff")
                self.send_header("Cache-Control", "no-store")
                self.end_headers()
                self.wfile.write(body)

            def log_message(self, format, *args):  # quiet: the terminal belongs to the view
                return

        self.httpd = ThreadingHTTPServer(("127.0.0.1", int(port)), Handler)
        self.httpd.daemon_threads = True
        self._thread = threading.Thread(target=self.httpd.serve_forever, name="tune-page", daemon=True)
        self._thread.start()

    @property
    def url(self) -> str:
        """Address of the page."""
        host, port = self.httpd.server_address[:2]
        return f"http://{host}:{port}/"

    def publish(self, state: dict) -> None:
        """Make ``state`` (JSON-safe) the newest refresh."""
        body = json.dumps(state, allow_nan=False).encode()
        with self._lock:
            self._state = body

    def close(self) -> None:
        """Stop serving. Safe to call twice."""
        if self._thread.is_alive():
            self.httpd.shutdown()
        self.httpd.server_close()
