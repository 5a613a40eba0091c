"""Open an HTML file in headless Chromium and report decoded images and errors (no selenium needed).

The page is copied beside itself with two small scripts added: one at the top of <head> that records every
error event (script errors, and resources such as images that fail to load or decode: their 'error' events
are caught in the capture phase), and one that, on 'load' (which waits for every image), checks that each <img> loaded, draws it on a
canvas and looks at its bottom row of pixels (a PNG cut short still "decodes" in Chromium, shown partly, but
its missing rows stay transparent, while every figure of ours has an opaque background), and writes the
results and natural sizes into a <pre id="__check"> element, all synchronously in the load handler (an
asynchronous ``HTMLImageElement.decode()`` sometimes never settled before Chromium dumped the page on a busy
machine).  Chromium's ``--dump-dom`` prints the DOM after ``--virtual-time-budget``, and
``--enable-logging=stderr`` prints the console messages, which are scanned for errors.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import tempfile
from pathlib import Path

CANDIDATES = ("/usr/bin/chromium", "chromium", "chromium-browser", "google-chrome", "google-chrome-stable")

_HEAD = """<script>window.__errors=[];window.addEventListener('error',function(e){var t=e.target;
window.__errors.push(t&&t.tagName?('failed to load '+t.tagName+' '+String(t.src||t.href||'').slice(0,60)):
String(e.message));},true);</script>"""
_TAIL = """<script>window.addEventListener('load',function(){var imgs=Array.prototype.slice.call(document.images);
function painted(i){try{var c=document.createElement('canvas');c.width=i.naturalWidth;c.height=i.naturalHeight;
var x=c.getContext('2d');x.drawImage(i,0,0);var d=x.getImageData(0,c.height-1,c.width,1).data;
for(var k=3;k<d.length;k+=4){if(d[k]>0)return true;}return false;}catch(e){return 'error: '+e;}}
var out=imgs.map(function(i){var ok=i.complete&&i.naturalWidth>0;return {w:i.naturalWidth,h:i.naturalHeight,
complete:i.complete,decoded:ok,bottom_painted:ok?painted(i):false,alt:i.alt};});
var p=document.createElement('pre');p.id='__check';document.body.appendChild(p);
p.textContent=JSON.stringify({final:true,images:out,errors:window.__errors});});</script>"""


def find_chromium() -> str | None:
    """Path of a Chromium binary, or None."""
    for c in CANDIDATES:
        p = c if os.path.isabs(c) and os.access(c, os.X_OK) else shutil.which(c)
        if p:
            return p
    return None


def check_page(html_path: str | os.PathLike, timeout_s: float = 90.0) -> dict:
    """Load ``html_path`` in headless Chromium; return {'images': [...], 'errors': [...], 'console_errors': [...]}."""
    exe = find_chromium()
    if exe is None:
        raise RuntimeError("no Chromium binary found")
    html_path = Path(html_path)
    text = html_path.read_text(encoding="utf-8")
    text = re.sub(r"<head>", "<head>" + _HEAD, text, count=1)
    text = text.replace("</body>", _TAIL + "</body>", 1)
    with tempfile.TemporaryDirectory() as tmp:
        probe = html_path.with_name(".browser-check-" + html_path.name)  # same folder: relative links still work
        probe.write_text(text, encoding="utf-8")
        m = None
        try:
            for budget_ms in (5000, 30000, 30000):  # a busy machine may need more virtual time; one fresh retry
                cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                       "--disable-background-networking", "--disable-component-update", "--disable-sync",
                       "--disable-dev-shm-usage", f"--user-data-dir={tmp}", "--enable-logging=stderr", "--v=0",
                       "--run-all-compositor-stages-before-draw", f"--virtual-time-budget={budget_ms}", "--dump-dom",
                       probe.resolve().as_uri()]
                proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout_s, check=False)
                found = re.search(r'<pre id="__check">(.*?)</pre>', proc.stdout, re.S)
                m = found or m
                if found is not None and '"final":true' in found.group(1).replace("&quot;", '"'):
                    break
        finally:
            probe.unlink(missing_ok=True)
    if m is None:
        raise RuntimeError(f"Chromium gave no check result (exit {proc.returncode}); stderr tail:\n{proc.stderr[-2000:]}")
    result = json.loads(m.group(1).replace("&quot;", '"').replace("&lt;", "<").replace("&gt;", ">").replace("&amp;", "&"))
    console = [ln for ln in proc.stderr.splitlines() if "CONSOLE" in ln]
    result["console_errors"] = [ln for ln in console if re.search(r"ERROR|Uncaught|Failed to load|net::ERR", ln)]
    result["console"] = console
    return result


_WIDTH_TAIL = """<script>window.addEventListener('load',function(){var t=Array.prototype.slice.call(
document.querySelectorAll('table'));var out={scroll_width:document.documentElement.scrollWidth,
client_width:document.documentElement.clientWidth,tables:t.map(function(e){var r=e.getBoundingClientRect();
var p=e.parentElement.getBoundingClientRect();return {id:e.id,right:r.right,parent_right:p.right,
width:r.width};})};var p=document.createElement('pre');p.id='__width';p.textContent=JSON.stringify(out);
document.body.appendChild(p);});</script>"""


def page_widths(html_path: str | os.PathLike, window_px: int = 1400, timeout_s: float = 90.0) -> dict:
    """Lay ``html_path`` out in headless Chromium at ``window_px`` wide; return the page's scroll and client
    widths and each table's right edge and width (CSS pixels)."""
    exe = find_chromium()
    if exe is None:
        raise RuntimeError("no Chromium binary found")
    html_path = Path(html_path)
    text = html_path.read_text(encoding="utf-8").replace("</body>", _WIDTH_TAIL + "</body>", 1)
    with tempfile.TemporaryDirectory() as tmp:
        probe = html_path.with_name(".browser-width-" + html_path.name)
        probe.write_text(text, encoding="utf-8")
        try:
            for budget_ms in (5000, 30000):
                cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                       "--disable-background-networking", "--disable-component-update", "--disable-sync",
                       "--disable-dev-shm-usage", f"--user-data-dir={tmp}", f"--window-size={window_px},1000",
                       "--hide-scrollbars", f"--virtual-time-budget={budget_ms}", "--dump-dom", probe.resolve().as_uri()]
                proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout_s, check=False)
                m = re.search(r'<pre id="__width">(.*?)</pre>', proc.stdout, re.S)
                if m is not None:
                    break
        finally:
            probe.unlink(missing_ok=True)
    if m is None:
        raise RuntimeError(f"Chromium gave no width result (exit {proc.returncode}); stderr tail:\n{proc.stderr[-2000:]}")
    return json.loads(m.group(1).replace("&quot;", '"').replace("&lt;", "<").replace("&gt;", ">").replace("&amp;", "&"))
