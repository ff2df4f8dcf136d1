"""The lab's web server: the page's files and a small JSON interface to one ``LabSession``.

Standard library only (``http.server``), bound to 127.0.0.1. Requests are
answered in their own threads; simulation runs in the session's worker
thread, so the page stays responsive while replicates run.

Interface (JSON bodies and answers):

- ``GET /api/view?since=I&generation=G`` : ``LabSession.view``
- ``GET /api/controls`` : the controls (key, label, kind, choices)
- ``POST /api/update`` ``{"changes": {key: value}}`` : set controls; answers the view
- ``POST /api/season`` | ``/api/replicate`` | ``/api/replicates`` ``{"n": N}`` | ``/api/stop`` |
  ``/api/reset`` : the page's buttons; answer the view
- ``POST /api/save`` ``{"name": NAME}`` : write NAME.toml and NAME.h5 in the output folder
"""

from __future__ import annotations

import json
import re
import threading
from dataclasses import asdict
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib.resources import files
from pathlib import Path
from urllib.parse import parse_qs, urlparse

from sim.config import ConfigError

from ..jsonable import jsonable
from .controls import controls
from .session import LabSession

__all__ = ["LabServer"]

HOST = "127.0.0.1"
_STATIC = {"/": ("index.html", "text/html"), "/lab.js": ("lab.js", "text/javascript"),
           "/lab.css": ("lab.css", "text/css")}
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,99}$")


class LabServer:
    """A lab page for one session, served on 127.0.0.1.

    Parameters
    ----------
    session : LabSession
    port : int
        0 picks a free port.
    output : path-like
        Folder where the page's Save writes its files.
    """

    def __init__(self, session: LabSession, *, port: int = 0, output="."):
        self.session = session
        self.output = Path(output)
        handler = type("Handler", (_Handler,), {"lab": self})
        self.httpd = ThreadingHTTPServer((HOST, port), handler)
        self.httpd.daemon_threads = True
        self._thread: threading.Thread | None = None

    @property
    def url(self) -> str:
        return f"http://{HOST}:{self.httpd.server_address[1]}/"

    def serve_forever(self) -> None:
        self.httpd.serve_forever(poll_interval=0.2)

    def start(self) -> LabServer:
        """Serve in a background thread (for scripts and tests)."""
        self._thread = threading.Thread(target=self.serve_forever, daemon=True, name="broodline-lab-http")
        self._thread.start()
        return self

    def close(self) -> None:
        """Stop the session's run and the server."""
        self.session.stop()
        if self._thread is not None:
            self.httpd.shutdown()
            self._thread.join()
        self.httpd.server_close()

    # -- the interface ------------------------------------------------------------------
    def answer(self, method: str, path: str, query: dict, body: dict):
        s = self.session
        if method == "GET" and path == "/api/view":
            since = int(query.get("since", ["0"])[0])
            gen = query.get("generation", [None])[0]
            return s.view(since, None if gen is None else int(gen))
        if method == "GET" and path == "/api/controls":
            return [asdict(c) for c in controls(s.raw)]
        if method != "POST":
            return None
        if path == "/api/update":
            s.update(body.get("changes", {}))
        elif path == "/api/season":
            s.step_season()
        elif path == "/api/replicate":
            s.run_one()
        elif path == "/api/replicates":
            s.run_many(body.get("n"))
        elif path == "/api/stop":
            s.stop()
        elif path == "/api/reset":
            s.reset()
        elif path == "/api/save":
            return self.save(str(body.get("name", "")))
        else:
            return None
        return s.view(int(body.get("since", 0)), body.get("generation"))

    def save(self, name: str) -> dict:
        if not _NAME.match(name):
            return {"saved": False, "message": f"name: letters, digits, '.', '_' and '-' only; got {name!r}"}
        try:
            saved = self.session.save(self.output / f"{name}.toml", self.output / f"{name}.h5")
        except (ConfigError, FileExistsError, OSError) as err:
            return {"saved": False, "message": str(err)}
        where = [str(saved.config)] + ([str(saved.results)] if saved.results else [])
        return {"saved": True, "config": str(saved.config),
                "results": None if saved.results is None else str(saved.results),
                "message": "saved " + " and ".join(where)}


class _Handler(BaseHTTPRequestHandler):
    lab: LabServer

    def log_message(self, format, *args):  # quiet: the terminal shows the address only
        pass

    def _send(self, status: int, body: bytes, kind: str) -> None:
        self.send_response(status)
        self.send_header("Content-Type", f"{kind}; charset=utf-8")
        self.send_header("Content-Length", str(len(body)))
        self.send_header("Cache-Control", "no-store")
        self.end_headers()
        self.wfile.write(body)

    def _handle(self, method: str) -> None:
        url = urlparse(self.path)
        if url.path == "/favicon.ico":
            self._send(HTTPStatus.NO_CONTENT, b"", "image/x-icon")
            return
        if method == "GET" and url.path in _STATIC:
            name, kind = _STATIC[url.path]
            self._send(HTTPStatus.OK, files("analysis.lab").joinpath("static", name).read_bytes(), kind)
            return
        body = {}
        if method == "POST":
            length = int(self.headers.get("Content-Length") or 0)
            try:
                body = json.loads(self.rfile.read(length) or b"{}")
            except json.JSONDecodeError:
                self._send(HTTPStatus.BAD_REQUEST, b'{"message": "body is not JSON"}', "application/json")
                return
        try:
            answer = self.lab.answer(method, url.path, parse_qs(url.query), body)
        except (KeyError, ValueError, TypeError) as err:  # a request the page never sends
            self._send(HTTPStatus.BAD_REQUEST, json.dumps({"message": str(err)}).encode(), "application/json")
            return
        except Exception as err:  # a fault: answered, so the page can say so (the session is unchanged)
            message = {"message": f"the server failed: {type(err).__name__}: {err}"}
            self._send(HTTPStatus.INTERNAL_SERVER_ERROR, json.dumps(message).encode(), "application/json")
            return
        if answer is None:
            self._send(HTTPStatus.NOT_FOUND, b'{"message": "not found"}', "application/json")
            return
        self._send(HTTPStatus.OK, json.dumps(jsonable(answer)).encode(), "application/json")

    def do_GET(self):
        self._handle("GET")

    def do_POST(self):
        self._handle("POST")
