"""Serving the planner with Voilà: one home for the server's options.

``make demo`` and the browser test both start Voilà with :func:`voila_command`::

    python -m circlesim.app.serving notebooks/planner.ipynb --port 8866

What the options do:

* the kernel is started and the notebook run before the page asks for it (a pre-started kernel),
  and the next one only 20 s after a page took it, so starting it does not compete with
  drawing the page;
* widget updates leave the server without waiting (:class:`NoDelayConnection`): Tornado's
  websockets leave Nagle's algorithm on, so a small message written right after a large one
  can wait for the browser's delayed acknowledgement (about 40 ms);
* JupyterLab extensions the app does not use are not loaded: plotly's renderer for static
  figures (several megabytes; the app's figures are widgets that bring their own plotly.js)
  and the code-highlighting styles (Voilà shows no code).
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence

from jupyter_server.services.kernels.connection.channels import ZMQChannelsWebsocketConnection

__all__ = ["UNUSED_EXTENSIONS", "NoDelayConnection", "main", "voila_command"]

#: JupyterLab extensions Voilà need not load for the planner.
UNUSED_EXTENSIONS = ("jupyterlab-plotly", "jupyterlab_pygments")


class NoDelayConnection(ZMQChannelsWebsocketConnection):
    """Kernel websocket connection with TCP_NODELAY set on the browser's socket."""

    def connect(self):
        if self.websocket_handler.ws_connection is not None:
            self.websocket_handler.set_nodelay(True)
        return super().connect()


def voila_command(notebook: str, port: int) -> list[str]:
    """The command line that serves ``notebook`` on 127.0.0.1:``port`` (no browser opened)."""
    return [sys.executable, "-m", "voila", notebook, "--no-browser", f"--port={port}",
            "--Voila.ip=127.0.0.1", "--Voila.port_retries=0",
            "--Voila.kernel_websocket_connection_class="
            "circlesim.app.serving.NoDelayConnection",
            "--preheat_kernel=True", "--pool_size=1", "--VoilaKernelManager.fill_delay=20",
            *(f"--VoilaConfiguration.extension_denylist={name}" for name in UNUSED_EXTENSIONS)]


def main(argv: Sequence[str] | None = None) -> None:
    """Serve a notebook with Voilà (replaces this process)."""
    parser = argparse.ArgumentParser(prog="python -m circlesim.app.serving",
                                     description="Serve a notebook with Voilà on 127.0.0.1.")
    parser.add_argument("notebook")
    parser.add_argument("--port", type=int, default=8866)
    args = parser.parse_args(argv)
    command = voila_command(args.notebook, args.port)
    os.execv(command[0], command)


if __name__ == "__main__":
    main()
