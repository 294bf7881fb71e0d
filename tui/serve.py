"""`prunetrail view RUN --serve`: the same viewer as a web page, for teaching a colleague.

textual-serve starts one viewer process per browser tab and streams its screen over a
websocket. The server binds to loopback unless told otherwise: any other address lets
everyone on that network open the viewer (and read the trail's instance).
"""

from __future__ import annotations

import argparse
import ipaddress
import shlex
import socket
import sys
from collections.abc import Sequence
from pathlib import Path

from rich.console import Console
from rich.text import Text

from tracer.base import PrunetrailError

LOOPBACK = "127.0.0.1"
DEFAULT_PORT = 8000
#: What each served tab runs: the viewer's own command line, in this interpreter.
_CHILD = "import sys; from tui.cli import main; sys.exit(main(sys.argv[1:]))"


def add_serve_options(parser: argparse.ArgumentParser) -> None:
    """Add --serve, --host and --port to the `view` parser."""
    group = parser.add_argument_group("serving the viewer as a web page")
    group.add_argument(
        "--serve",
        action="store_true",
        help="serve the viewer in a browser (textual-serve) instead of this terminal",
    )
    group.add_argument(
        "--host",
        default=LOOPBACK,
        help=f"address to listen on (default: {LOOPBACK}, this machine only; any other "
        "address exposes the viewer to that network)",
    )
    group.add_argument(
        "--port", type=int, default=DEFAULT_PORT, help=f"port (default: {DEFAULT_PORT})"
    )


def child_command(view_argv: Sequence[str]) -> str:
    """The shell command each browser tab runs: `prunetrail view` with these arguments."""
    return shlex.join([sys.executable, "-c", _CHILD, "view", *view_argv])


def is_loopback(host: str) -> bool:
    """Whether `host` names this machine only (localhost, 127.x, ::1)."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def public_url(host: str, port: int) -> str:
    """The address to open; a wildcard host (0.0.0.0, ::) is shown as this machine's name."""
    shown = socket.gethostname() if host in ("0.0.0.0", "::", "") else host
    if ":" in shown:
        shown = f"[{shown}]"
    return f"http://{shown}:{port}"


def serve_view(args: argparse.Namespace) -> int:
    """`view RUN --serve`: check the trail opens here, then serve the same view per tab."""
    from tracer.trails import open_trail

    if args.screenshot:
        raise PrunetrailError("--serve and --screenshot do not go together")
    open_trail(args.trail)  # a bad file fails here, in one line, not in every browser tab
    view_argv = [str(Path(args.trail).resolve())]
    if args.at is not None:
        view_argv += ["--at", str(args.at)]
    if args.prefix:
        view_argv += ["--prefix", " ".join(map(str, args.prefix))]
    if args.filter:
        view_argv += ["--filter", args.filter]
    view_argv += ["--memory-mb", str(args.memory_mb)]
    return serve(view_argv, f"prunetrail view {Path(args.trail).name}", args.host, args.port)


def serve(view_argv: Sequence[str], title: str, host: str, port: int) -> int:
    """Serve `prunetrail view VIEW_ARGV` on host:port until Ctrl-C; returns the exit status."""
    from textual_serve.server import Server

    if not 0 < port < 65536:
        raise PrunetrailError(f"--port must be 1..65535, found {port}")
    url = public_url(host, port)
    console = Console(stderr=True, highlight=False, markup=False)
    print(f"serving {title} at {url}  (Ctrl-C stops)", flush=True)
    if not is_loopback(host):
        console.print(
            Text(
                f"warning: listening on {host}: anyone who can reach this machine on that "
                "network can open the viewer",
                style="yellow",
            )
        )
    server = Server(child_command(view_argv), host=host, port=port, title=title, public_url=url)
    try:
        server.serve()
    except OSError as exc:
        raise PrunetrailError(f"cannot listen on {host}:{port}: {exc.strerror or exc}") from exc
    return 0
