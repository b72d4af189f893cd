"""The client of the kernel a record runs in: jupyter_client's asyncio client, its channels waiting in short slices.

An asyncio wait on a zmq socket can miss the socket's wake-up: the message is queued, the event loop is never told,
and the wait returns only when its timeout expires, because pyzmq looks at the socket once more then (pyzmq issue
#1558 shows the same symptom). nbclient waits for a cell's reply with the cell's whole timeout (600 s) and for its
output with no timeout at all. A missed wake-up then holds a record for ten minutes, or makes nbclient give up on
the cell's output after ``iopub_timeout`` and go on without it. Seen here on a cell whose output is hundreds of
messages (the live screen's record part), about one run in ten under load.

:class:`SteadyChannel` waits in slices of at most :data:`SLICE_S` up to the caller's deadline. Each slice ends
with that last look, so a missed wake-up costs at most one slice, and the caller's timeout means what it says.
"""

from __future__ import annotations

from queue import Empty
from time import monotonic
from typing import Any

from jupyter_client.asynchronous.client import AsyncKernelClient
from jupyter_client.channels import AsyncZMQSocketChannel
from traitlets import Type

SLICE_S = 0.25  # the longest a queued message can wait unseen; the idle cost is a few polls a second


class SteadyChannel(AsyncZMQSocketChannel):
    """A channel whose ``get_msg`` waits in slices, so a queued message is seen within :data:`SLICE_S`."""

    async def get_msg(self, timeout: float | None = None) -> dict[str, Any]:  # type: ignore[override]
        deadline = None if timeout is None else monotonic() + timeout
        while True:
            left = SLICE_S if deadline is None else max(0.0, deadline - monotonic())
            try:
                return await super().get_msg(timeout=min(SLICE_S, left))
            except Empty:
                if deadline is not None and monotonic() >= deadline:
                    raise


class SteadyKernelClient(AsyncKernelClient):
    """jupyter_client's asyncio kernel client with :class:`SteadyChannel` for its shell, IOPub, stdin and control
    channels (the heartbeat runs on a thread of its own, with blocking polls)."""

    shell_channel_class = Type(SteadyChannel)
    iopub_channel_class = Type(SteadyChannel)
    stdin_channel_class = Type(SteadyChannel)
    control_channel_class = Type(SteadyChannel)
