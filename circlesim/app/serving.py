"""Serving the planner with Voilà: send widget updates to the browser without delay.

Tornado's websockets leave Nagle's algorithm on, so a small message written right after a
large one can wait for the browser's delayed acknowledgement (about 40 ms). The planner sends
a figure update and then a few small panel updates on every change, so ``make demo`` (and the
browser test) start Voilà with::

    --Voila.kernel_websocket_connection_class=circlesim.app.serving.NoDelayConnection
"""

from __future__ import annotations

from jupyter_server.services.kernels.connection.channels import ZMQChannelsWebsocketConnection

__all__ = ["VOILA_OPTION", "NoDelayConnection"]

#: The Voilà command-line option that selects this connection class.
VOILA_OPTION = ("--Voila.kernel_websocket_connection_class="
                "circlesim.app.serving.NoDelayConnection")


class NoDelayConnection(ZMQChannelsWebsocketConnection):
    """Kernel websocket connection with TCP_NODELAY set on the browser's socket."""

    def connect(self):
        if self.websocket_handler.ws_connection is not None:
            self.websocket_handler.set_nodelay(True)
        return super().connect()
