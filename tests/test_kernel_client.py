"""The record's kernel client sees a queued message within a slice, even when the socket's wake-up is missed.

The fault (pyzmq issue #1558 describes the same symptom): an asyncio wait on a zmq socket is never woken for a message
already queued, and returns it only when its timeout expires, when pyzmq looks at the socket once more. Here it held
a workbook's cell for nbclient's whole cell timeout (600 s), about one run in ten with two runs side by side. The
socket below misses every wake-up, as that socket did, and keeps that last look; the clock is the test's own, so
nothing here waits.
"""

from __future__ import annotations

import asyncio
from collections.abc import Coroutine, Iterator
from concurrent.futures import ThreadPoolExecutor
from queue import Empty
from typing import Any

import pytest
import zmq
import zmq.asyncio
from jupyter_client.channels import AsyncZMQSocketChannel
from jupyter_client.session import Session

from kernels_helpers import kernel_client
from kernels_helpers.kernel_client import SLICE_S, SteadyChannel, SteadyKernelClient


class Clock:
    def __init__(self) -> None:
        self.now = 0.0

    def monotonic(self) -> float:
        return self.now


class MissesWakeUps(zmq.asyncio.Socket):
    """A socket whose wait never hears of a queued message: the wait runs out its whole timeout on the test's clock,
    then takes pyzmq's last look (``poll(0)``). Records each wait's timeout in ms."""

    clock: Clock
    waits: list[int | None]

    def poll(self, timeout: int | None = None, flags: int = zmq.POLLIN) -> Any:  # type: ignore[override]
        self.waits.append(timeout)
        if timeout is None:
            raise AssertionError("a wait without a timeout would never end on a socket that misses its wake-up")
        self.clock.now += timeout / 1000
        look = super().poll(0, flags)

        async def after_the_wait() -> int:
            await asyncio.sleep(0)  # a real wait gives the event loop a turn
            return int(await look)
        return after_the_wait()


@pytest.fixture
def pair(monkeypatch: pytest.MonkeyPatch) -> Iterator[tuple[MissesWakeUps, zmq.Socket, Session, Clock]]:
    """A socket that misses wake-ups, its sending peer (inproc), a session and the test's clock."""
    clock = Clock()
    monkeypatch.setattr(kernel_client, "monotonic", clock.monotonic)  # the module's clock only
    ctx = zmq.asyncio.Context()
    receiver = MissesWakeUps(ctx, zmq.PAIR)
    receiver.clock, receiver.waits = clock, []
    receiver.bind("inproc://shearbook-test")
    sender = zmq.Context.shadow(ctx.underlying).socket(zmq.PAIR)
    sender.connect("inproc://shearbook-test")
    try:
        yield receiver, sender, Session(key=b""), clock
    finally:
        sender.close(linger=0)
        receiver.close(linger=0)
        ctx.term()


def _run(coro: Coroutine[Any, Any, Any]) -> Any:
    """``coro`` on an event loop of its own thread: a worker that ran a browser test keeps Playwright's loop running
    on its main thread, where ``asyncio.run`` is refused."""
    with ThreadPoolExecutor(1) as pool:
        return pool.submit(asyncio.run, coro).result()


def _send(sender: zmq.Socket, session: Session, msg_type: str) -> str:
    msg = session.msg(msg_type, content={"status": "ok"})
    sender.send_multipart(session.serialize(msg))
    return str(msg["header"]["msg_id"])


def test_a_queued_reply_is_taken_within_one_slice_though_its_wake_up_is_missed(pair: Any) -> None:
    receiver, sender, session, clock = pair
    msg_id = _send(sender, session, "execute_reply")
    reply = _run(SteadyChannel(receiver, session).get_msg(timeout=600))  # nbclient's wait for a cell
    assert reply["header"]["msg_id"] == msg_id
    assert receiver.waits == [int(SLICE_S * 1000)] and clock.now == pytest.approx(SLICE_S)


def test_jupyter_client_s_own_channel_holds_the_same_reply_for_the_whole_timeout(pair: Any) -> None:
    """Why the slices: the plain channel waits once, for all of the caller's timeout (the fault, reproduced)."""
    receiver, sender, session, _clock = pair
    msg_id = _send(sender, session, "execute_reply")
    reply = _run(AsyncZMQSocketChannel(receiver, session).get_msg(timeout=600))
    assert reply["header"]["msg_id"] == msg_id
    assert receiver.waits == [600_000]  # ten minutes before the reply already queued is seen


def test_the_caller_s_timeout_still_ends_the_wait_with_empty(pair: Any) -> None:
    receiver, _sender, session, clock = pair
    with pytest.raises(Empty):
        _run(SteadyChannel(receiver, session).get_msg(timeout=1.1))
    assert clock.now == pytest.approx(1.1)  # not a slice sooner, not a slice later
    assert all(w is not None and w <= SLICE_S * 1000 for w in receiver.waits)
    assert len(receiver.waits) == 5  # 0.25 * 4, then the last 0.1


def test_a_wait_without_a_timeout_waits_in_slices_until_the_message_comes(pair: Any) -> None:
    """nbclient waits for a cell's output with no timeout: each slice looks again, so an output is never lost."""
    receiver, sender, session, _clock = pair
    channel = SteadyChannel(receiver, session)

    async def later() -> dict[str, Any]:
        task = asyncio.ensure_future(channel.get_msg(timeout=None))
        for _ in range(3):
            await asyncio.sleep(0)  # the wait runs, finds nothing, waits again
        assert not task.done()
        _send(sender, session, "display_data")
        return await task

    msg = _run(later())
    assert msg["header"]["msg_type"] == "display_data"
    assert len(receiver.waits) >= 2 and set(receiver.waits) == {int(SLICE_S * 1000)}


def test_the_record_s_kernel_is_reached_through_slicing_channels(tmp_path: Any) -> None:
    from kernels_helpers.record import start_kernel, stop_kernel

    km = start_kernel(tmp_path)
    try:
        kc = km.client()
        assert isinstance(kc, SteadyKernelClient)
        for channel in (kc.shell_channel, kc.iopub_channel, kc.stdin_channel, kc.control_channel):
            assert isinstance(channel, SteadyChannel)
    finally:
        stop_kernel(km)
