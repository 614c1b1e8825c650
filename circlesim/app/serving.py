"""Serving the planner with Voilà: one home for the server's options.

``make demo`` and the browser test both start the server with :func:`voila_command`::

    python -m circlesim.app.serving notebooks/planner.ipynb --port 8866

which runs Voilà (:class:`PlannerServer`) with these options:

* the kernel is started and the notebook run before the page asks for it (a pre-started kernel),
  and the next one only 20 s after a page took it, so starting it does not compete with
  drawing the page;
* widget updates leave the server without waiting (:class:`NoDelayConnection`): Tornado's
  websockets leave Nagle's algorithm on, so a small message written right after a large one
  can wait for the browser's delayed acknowledgement (about 40 ms);
* the cartesian build of plotly.js is published as a static file that the page starts
  fetching at once, and the figures are drawn with it (:mod:`circlesim.app.plotly_bundle`)
  instead of with plotly's own front end and its full build;
* JupyterLab extensions the app does not use are not loaded: plotly's renderer for static
  figures (several megabytes; the app's figures are widgets drawn with the published build)
  and the code-highlighting styles (Voilà shows no code).
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from pathlib import Path

from jupyter_server.services.kernels.connection.channels import ZMQChannelsWebsocketConnection
from voila.app import Voila

from circlesim.app.plotly_bundle import (
    BUNDLE_ADDRESS_ENV,
    PLOTLY_JS_VERSION,
    build_fits_plotly,
    bundle_address,
    bundle_directory,
)

__all__ = ["UNUSED_EXTENSIONS", "NoDelayConnection", "PlannerServer", "main", "voila_command",
           "voila_options"]

#: JupyterLab extensions Voilà need not load for the planner.
UNUSED_EXTENSIONS = ("jupyterlab-plotly", "jupyterlab_pygments")

#: The planner's page template (Voilà's lab page that starts loading plotly early).
PAGE_TEMPLATE_DIR = Path(__file__).parent / "page"


class NoDelayConnection(ZMQChannelsWebsocketConnection):
    """Kernel websocket connection with TCP_NODELAY set on the browser's socket."""

    def connect(self):
        if self.websocket_handler.ws_connection is not None:
            self.websocket_handler.set_nodelay(True)
        return super().connect()


class PlannerServer(Voila):
    """Voilà that publishes the plotly.js build and serves the planner's page template.

    The kernels it starts find the build's address in :data:`~circlesim.app.plotly_bundle.
    BUNDLE_ADDRESS_ENV`, so that the planner's figures are drawn with it. If the installed
    plotly expects another major version of plotly.js, the page and the figures are plotly's
    own.
    """

    def setup_template_dirs(self) -> None:
        super().setup_template_dirs()
        self.template_paths.insert(0, str(PAGE_TEMPLATE_DIR))
        if not build_fits_plotly():
            self.log.warning("the installed plotly expects plotly.js other than %s: the "
                             "figures use plotly's own front end", PLOTLY_JS_VERSION)
            return
        address = bundle_address()
        self.static_paths.append(str(bundle_directory()))
        # the page renderer reads extra template resources from the configuration itself
        resources = dict(self.config.VoilaConfiguration.get("resources", {}))
        self.config.VoilaConfiguration.resources = {**resources,
                                                    "circlesim_plotly_bundle": address}
        os.environ[BUNDLE_ADDRESS_ENV] = address


def voila_options(port: int) -> list[str]:
    """Voilà's command-line options for serving the planner on 127.0.0.1:``port``."""
    return ["--no-browser", f"--port={port}", "--Voila.ip=127.0.0.1", "--Voila.port_retries=0",
            "--Voila.kernel_websocket_connection_class="
            "circlesim.app.serving.NoDelayConnection",
            "--preheat_kernel=True", "--pool_size=1", "--VoilaKernelManager.fill_delay=20",
            *(f"--VoilaConfiguration.extension_denylist={name}" for name in UNUSED_EXTENSIONS)]


def voila_command(notebook: str, port: int) -> list[str]:
    """The command line that serves ``notebook`` on 127.0.0.1:``port`` (no browser opened)."""
    return [sys.executable, "-m", "circlesim.app.serving", notebook, f"--port={port}"]


def main(argv: Sequence[str] | None = None) -> None:
    """Serve a notebook with :class:`PlannerServer` on 127.0.0.1 (until interrupted)."""
    parser = argparse.ArgumentParser(prog="python -m circlesim.app.serving",
                                     description="Serve a notebook with Voilà on 127.0.0.1.")
    parser.add_argument("notebook")
    parser.add_argument("--port", type=int, default=8866)
    args = parser.parse_args(argv)
    PlannerServer.launch_instance([args.notebook, *voila_options(args.port)])


if __name__ == "__main__":
    main()
