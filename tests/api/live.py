"""A real uvicorn server on 127.0.0.1 in a background thread, for tests over real HTTP."""

from __future__ import annotations

import socket
import threading
import time
from types import TracebackType

import uvicorn
from fastapi import FastAPI

from service.api.protocol import HttpProtocol


class LiveServer:
    """Serves ``app`` on a free loopback port while the ``with`` block runs."""

    def __init__(self, app: FastAPI) -> None:
        self.app = app
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind(("127.0.0.1", 0))
        self.port: int = self.sock.getsockname()[1]
        config = uvicorn.Config(
            app,
            log_config=None,
            access_log=False,
            lifespan="on",
            timeout_graceful_shutdown=2,
            http=HttpProtocol,  # as `oxyrule serve` runs
        )
        self.server = uvicorn.Server(config)
        self.thread = threading.Thread(
            target=self.server.run, kwargs={"sockets": [self.sock]}, daemon=True
        )

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def __enter__(self) -> LiveServer:
        self.thread.start()
        deadline = time.monotonic() + 10
        while not self.server.started:
            if time.monotonic() > deadline or not self.thread.is_alive():
                raise RuntimeError("the test server did not start")
            time.sleep(0.01)
        return self

    def __exit__(
        self,
        kind: type[BaseException] | None,
        value: BaseException | None,
        traceback: TracebackType | None,
    ) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=10)
        self.sock.close()
