"""Start the web page under uvicorn on this computer (127.0.0.1 unless told otherwise)."""

from __future__ import annotations

import ipaddress
import socket
import sys
import threading
import webbrowser

LOOPBACK = ("127.0.0.1", "localhost", "::1")


def is_loopback(host: str) -> bool:
    if host in LOOPBACK:
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def port_free(host: str, port: int) -> bool:
    with socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET) as s:
        try:
            s.bind((host, port))
        except OSError:
            return False
    return True


def serve(
    host: str = "127.0.0.1",
    port: int = 8765,
    *,
    open_browser: bool = True,
    max_upload_mb: float = 200,
    store=None,
) -> None:
    """Run the page until interrupted; the runs' files are removed when it stops."""
    import uvicorn

    from wallstress.web.app import create_app

    if not port_free(host, port):
        raise OSError(
            f"port {port} on {host} is in use (another wallstress serve?); choose another with --port"
        )
    hosts = ["127.0.0.1", "localhost", "[::1]"] if is_loopback(host) else ["*"]
    if not is_loopback(host):
        print(
            f"wallstress: warning: listening on {host}: other computers on the network can open "
            "this page and send files to it; use it only on a network you trust",
            file=sys.stderr,
        )
    if store is not None:  # a clear message now rather than on the page
        from wallstress.cohort.store import open_store

        open_store(store, read_only=True).close()
    app = create_app(max_upload_mb=max_upload_mb, allowed_hosts=hosts, store=store)
    url = f"http://{'127.0.0.1' if is_loopback(host) else host}:{port}/"
    print(f"wallstress: the page is at {url} (Ctrl+C stops it and deletes the uploaded files)")
    if open_browser:
        threading.Timer(1.0, webbrowser.open, [url]).start()
    uvicorn.run(app, host=host, port=port, log_level="warning")
