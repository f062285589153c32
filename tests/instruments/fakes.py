"""Scripted SCPI instruments for driver tests: plain handler functions for ScriptedTransport."""

from __future__ import annotations

from collections.abc import Callable, Mapping

from fixture.instruments import ScriptedTransport, Session, load_profile

NO_ERROR = '+0,"No error"'

Reply = str | bytes | Callable[[], "str | bytes | None"] | None


class FakeInstrument:
    """Fixed replies per query text, an error queue, every write accepted.

    An unknown query gets no reply (the read then times out), as on a real instrument.
    ``replies`` values may be callables, for replies that change from call to call.
    """

    def __init__(self, replies: Mapping[str, Reply] | None = None, errors: tuple[str, ...] = ()) -> None:
        self.replies = dict(replies or {})
        self.errors = list(errors)

    def __call__(self, text: str) -> str | bytes | None:
        if text == "SYST:ERR?":
            return self.errors.pop(0) if self.errors else NO_ERROR
        if text in self.replies:
            reply = self.replies[text]
            return reply() if callable(reply) else reply
        return None


def scripted_session(profile: str, handler: Callable[[str], str | bytes | None], **session_options) \
        -> tuple[Session, ScriptedTransport]:
    """A session on a shipped profile over a scripted transport, and the transport (for ``sent``)."""
    transport = ScriptedTransport(handler, name="TCPIP0::fake::inst0::INSTR")
    return Session(transport, load_profile(profile), **session_options), transport


IDN = {
    "tessaly-yqc83": "TESSALY INSTRUMENTS,YQ-C83,T1,1.0",
    "tessaly-yqs47": "TESSALY INSTRUMENTS,YQ-S47,T2,1.0",
    "tessaly-yqp26": "TESSALY INSTRUMENTS,YQ-P26,T3,1.0",
    "knobline-ka2": "KNOBLINE,KA-2,T4,1.0",
}


def sequence(*replies: str | bytes | None) -> Callable[[], str | bytes | None]:
    """A reply that is each of ``replies`` in turn, then the last one for ever."""
    queue = list(replies)

    def next_reply() -> str | bytes | None:
        return queue.pop(0) if len(queue) > 1 else queue[0]

    return next_reply
