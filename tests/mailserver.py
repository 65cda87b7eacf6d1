"""A real SMTP server on loopback (aiosmtpd) that keeps what it is sent, for mail tests."""

from __future__ import annotations

import email
from email import policy
from email.message import EmailMessage

from aiosmtpd.controller import Controller

from tests.reliability.server import free_port


class MailCollector:
    """aiosmtpd handler that accepts every message and keeps it parsed."""

    def __init__(self) -> None:
        self.messages: list[EmailMessage] = []

    async def handle_DATA(self, server, session, envelope):
        raw = envelope.original_content or envelope.content
        self.messages.append(email.message_from_bytes(raw, policy=policy.default))
        return "250 Message accepted for delivery"


class MailServer:
    """A loopback SMTP server on a free port; ``start`` and ``stop`` it around a test."""

    def __init__(self) -> None:
        self.port = free_port()
        self.collector = MailCollector()
        self.controller: Controller | None = None

    def start(self) -> None:
        self.controller = Controller(self.collector, hostname="127.0.0.1", port=self.port)
        self.controller.start()

    def stop(self) -> None:
        if self.controller is not None:
            self.controller.stop()
            self.controller = None

    @property
    def messages(self) -> list[EmailMessage]:
        return self.collector.messages
