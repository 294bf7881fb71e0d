"""`prunetrail view RUN --serve`: the viewer served as a web page, opened in a real browser.

The server runs as a subprocess, as a user starts it. The test fetches the page and its
script, opens the app's websocket itself (the stream must carry the node list's text), and
then loads the page in headless Chromium through the DevTools protocol, waiting for the
page to mark the app's first bytes, and takes a screenshot. Chromium comes from the
system's packages (`apt-get install chromium`); without it that part is skipped, saying so.
The tests that start the server are `thorough` (CI's second step runs them); set
PRUNETRAIL_KEEP_SCREENSHOT to a file name to keep the browser's PNG.
"""

from __future__ import annotations

import asyncio
import base64
import json
import os
import shlex
import shutil
import signal
import socket
import struct
import subprocess
import sys
import time
import zlib
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import aiohttp
import pytest

from tracer.cli import main as tracer_main
from tui.cli import main as view_main
from tui.serve import LOOPBACK, child_command, is_loopback, public_url

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMIUM_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--window-size=1200,800",
]
#: Generous limits for a loaded 2-core machine (guards against hanging, not timings).
START_LIMIT = 90.0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind((LOOPBACK, 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="module")
def served(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, str]]:
    """A running `view --serve` of the meter_lane trail: (its printed first line, url)."""
    folder = tmp_path_factory.mktemp("serve")
    trail = folder / "meter.trail"
    scenario = ROOT / "scenarios" / "meter_lane.tsp"
    assert tracer_main(["solve", str(scenario), "--improve", "none", "-o", str(trail)]) == 0
    port = _free_port()
    code = "import sys; from tui.cli import main; sys.exit(main(sys.argv[1:]))"
    argv = ["view", str(trail), "--serve", "--port", str(port)]
    server = subprocess.Popen(
        [sys.executable, "-c", code, *argv],
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
        cwd=folder,
    )
    assert server.stdout is not None
    first = server.stdout.readline()
    url = f"http://{LOOPBACK}:{port}"
    deadline = time.monotonic() + START_LIMIT
    while True:
        try:
            socket.create_connection((LOOPBACK, port), timeout=1).close()
            break
        except OSError:
            assert server.poll() is None, first + server.stdout.read()
            assert time.monotonic() < deadline, "the server never listened"
            time.sleep(0.2)
    yield first, url
    server.send_signal(signal.SIGINT)
    try:
        server.wait(30)
    except subprocess.TimeoutExpired:
        server.kill()
        server.wait()


def test_child_command_runs_the_viewer_with_the_same_arguments() -> None:
    """Each tab runs `view` with the given arguments, quoted for a shell."""
    words = shlex.split(child_command(["my run.trail", "--at", "7"]))
    assert words[0] == sys.executable
    assert words[-4:] == ["view", "my run.trail", "--at", "7"]


def test_loopback_and_wildcard_addresses() -> None:
    """Loopback is recognised; a wildcard host is shown as this machine's name."""
    assert is_loopback("127.0.0.1") and is_loopback("::1") and is_loopback("localhost")
    assert not is_loopback("0.0.0.0") and not is_loopback("192.0.2.7")
    assert public_url("0.0.0.0", 8000) == f"http://{socket.gethostname()}:8000"
    assert public_url("::1", 9000) == "http://[::1]:9000"


def test_serving_a_missing_trail_fails_in_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A trail that cannot be read stops `--serve` before it listens: exit 2, one line."""
    assert view_main(["view", str(tmp_path / "none.trail"), "--serve"]) == 2
    message = capsys.readouterr().err.strip()
    assert "none.trail" in message and "\n" not in message


def test_serve_and_screenshot_do_not_go_together(capsys: pytest.CaptureFixture[str]) -> None:
    """--serve with --screenshot is refused with exit 2."""
    trail = ROOT / "scenarios" / "boiler_round_broken.jsonl"
    assert view_main(["view", str(trail), "--serve", "--screenshot", "x.svg"]) == 2
    assert "--screenshot" in capsys.readouterr().err


@pytest.mark.thorough  # a server process and a viewer process: about 10 s
def test_serve_prints_the_loopback_address(served: tuple[str, str]) -> None:
    """The first line printed names the loopback address to open."""
    first, url = served
    assert first.startswith("serving prunetrail view meter.trail at ") and url in first


async def _page_and_session(url: str) -> tuple[str, int, str]:
    async with aiohttp.ClientSession() as http:
        async with http.get(url + "/") as response:
            html = await response.text()
        async with http.get(url + "/static/js/textual.js") as response:
            script = len(await response.read())
        text = ""
        async with http.ws_connect(url.replace("http", "ws") + "/ws?width=120&height=36") as ws:
            deadline = time.monotonic() + START_LIMIT
            while time.monotonic() < deadline and not ("prune" in text and "expand" in text):
                try:
                    message = await ws.receive(timeout=5)
                except TimeoutError:
                    continue
                if message.type == aiohttp.WSMsgType.BINARY:
                    text += message.data.decode("utf-8", "replace")
                elif message.type in (aiohttp.WSMsgType.CLOSE, aiohttp.WSMsgType.CLOSED):
                    break
    return html, script, text


@pytest.mark.thorough  # a server process and a viewer process: about 10 s
def test_page_script_and_app_session(served: tuple[str, str]) -> None:
    """The page and its script load, and the app's websocket streams the node list."""
    _, url = served
    html, script_bytes, screen = asyncio.run(_page_and_session(url))
    assert f"ws://{LOOPBACK}" in html and "/ws" in html
    assert "textual.js" in html and script_bytes > 10_000
    assert "expand" in screen and "prune" in screen, screen[-2000:]


async def _browser_screenshot(url: str, profile: Path) -> tuple[bool, bytes]:
    """Load `url` in headless Chromium (DevTools protocol): (app started, PNG bytes)."""
    assert CHROMIUM is not None
    browser = subprocess.Popen(
        [CHROMIUM, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "--remote-debugging-port=0"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        deadline = time.monotonic() + START_LIMIT
        active = profile / "DevToolsActivePort"
        while not (active.is_file() and active.read_text().strip()):
            assert browser.poll() is None and time.monotonic() < deadline, "chromium did not start"
            await asyncio.sleep(0.1)
        port = int(active.read_text().split()[0])
        async with aiohttp.ClientSession() as http:
            async with http.get(f"http://{LOOPBACK}:{port}/json/list") as response:
                pages = [p for p in await response.json() if p["type"] == "page"]
            async with http.ws_connect(pages[0]["webSocketDebuggerUrl"], max_msg_size=0) as ws:
                counter = iter(range(1, 1 << 30))

                async def call(method: str, **params: Any) -> dict[str, Any]:
                    ident = next(counter)
                    await ws.send_json({"id": ident, "method": method, "params": params})
                    async for message in ws:
                        data = json.loads(message.data)
                        if data.get("id") == ident:
                            return dict(data.get("result", {}))
                    raise AssertionError("the DevTools connection closed")

                await call("Page.enable")
                await call("Page.navigate", url=url + "/")
                started = False
                probe = "document.body !== null && document.body.classList.contains('-first-byte')"
                while not started and time.monotonic() < deadline:
                    await asyncio.sleep(0.25)
                    result = await call("Runtime.evaluate", expression=probe, returnByValue=True)
                    started = bool(result.get("result", {}).get("value"))
                await asyncio.sleep(2.0)  # let the first screens paint
                shot = await call("Page.captureScreenshot", format="png")
        return started, base64.b64decode(shot["data"])
    finally:
        browser.terminate()
        browser.wait(30)


def _png_rows(png: bytes) -> tuple[int, int, bytes]:
    """Width, height and the decompressed (still filtered) scanlines of a PNG."""
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    at, idat, width, height = 8, b"", 0, 0
    while at < len(png):
        (size,) = struct.unpack(">I", png[at : at + 4])
        kind, body = png[at + 4 : at + 8], png[at + 8 : at + 8 + size]
        if kind == b"IHDR":
            width, height = struct.unpack(">II", body[:8])
        elif kind == b"IDAT":
            idat += body
        at += 12 + size
    return width, height, zlib.decompress(idat)


@pytest.mark.thorough  # a browser and a second viewer process: about 15 s
@pytest.mark.skipif(
    CHROMIUM is None,
    reason="headless Chromium is not installed (Debian/Ubuntu: apt-get install chromium)",
)
def test_browser_shows_the_viewer(served: tuple[str, str], tmp_path: Path) -> None:
    """Headless Chromium loads the page, the app session starts, the screenshot is not blank."""
    _, url = served
    started, png = asyncio.run(_browser_screenshot(url, tmp_path / "profile"))
    if os.environ.get("PRUNETRAIL_KEEP_SCREENSHOT"):
        Path(os.environ["PRUNETRAIL_KEEP_SCREENSHOT"]).write_bytes(png)
    assert started, "the page never received the app's first bytes"
    width, height, rows = _png_rows(png)
    assert width == 1200 and height > 400  # the window, less any browser frame
    # A blank page compresses to a handful of distinct byte values; a drawn screen of
    # text in several colours uses far more.
    assert len(set(rows)) > 40
