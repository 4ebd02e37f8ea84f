"""A loopback SMTP server for the tests: aiosmtpd on 127.0.0.1, on a free port.

``RecordingHandler`` stores every message it accepts and can be told to refuse
chosen recipients (550), to answer DATA with given replies first, or to hang up
right after accepting the data (the "unknown outcome" of a send).
"""

from __future__ import annotations

import contextlib
import socket
from collections.abc import Iterable, Iterator
from typing import Any


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class RecordingHandler:
    """Records messages; can refuse recipients, answer DATA with given codes, or hang up.

    ``refuse``: recipients answered with 550. ``data_replies``: replies given to DATA, one per
    message, before any message is accepted (nothing is recorded for those). ``drop_after_data``:
    close the connection right after accepting (and recording) the data.
    """

    def __init__(
        self,
        *,
        refuse: Iterable[str] = (),
        data_replies: Iterable[str] = (),
        drop_after_data: bool = False,
    ) -> None:
        self.messages: list[tuple[str, list[str], bytes]] = []
        self.sessions = 0
        self.refuse = set(refuse)
        self.data_replies = list(data_replies)
        self.drop_after_data = drop_after_data

    async def handle_EHLO(
        self, server: Any, session: Any, envelope: Any, hostname: str, responses: list[str]
    ) -> list[str]:  # noqa: N802
        self.sessions += 1
        session.host_name = hostname
        return responses

    async def handle_RCPT(
        self, server: Any, session: Any, envelope: Any, address: str, rcpt_options: list[str]
    ) -> str:  # noqa: N802
        if address in self.refuse:
            return "550 5.1.1 mailbox unavailable"
        envelope.rcpt_tos.append(address)
        return "250 OK"

    async def handle_DATA(self, server: Any, session: Any, envelope: Any) -> str:  # noqa: N802
        if self.data_replies:
            return self.data_replies.pop(0)
        self.messages.append((envelope.mail_from, list(envelope.rcpt_tos), envelope.content))
        if self.drop_after_data:
            server.transport.abort()
        return "250 2.0.0 queued"


@contextlib.contextmanager
def smtp_server(handler: Any, **kwargs: Any) -> Iterator[int]:
    """Serve ``handler`` on 127.0.0.1 and yield the port; ``kwargs`` go to the Controller."""
    # imported here, so that importing this module (via toml_fixtures) does not load aiosmtpd
    from aiosmtpd.controller import Controller

    port = free_port()
    controller = Controller(handler, hostname="127.0.0.1", port=port, ready_timeout=5, **kwargs)
    controller.start()
    try:
        yield port
    finally:
        controller.stop()
