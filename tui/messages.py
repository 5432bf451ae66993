"""Every message the tailing thread sends to the dashboard: small, and the frequent ones replaceable."""
from __future__ import annotations

from dataclasses import dataclass

from textual.message import Message


@dataclass
class JournalAdvanced(Message):
    """New lines were folded into the shared run state; redraw from it."""

    events: int          # events folded since the last message of this kind was sent
    members: int         # members done after them
    backlog: bool        # True while the reader still has unread bytes (the opening read)

    def can_replace(self, message: Message) -> bool:
        # The state is shared: a later note of progress says all an earlier one did.
        return isinstance(message, JournalAdvanced)


@dataclass
class JournalRestarted(Message):
    """The journal was truncated or replaced; the state was emptied and is being read again."""

    restarts: int


@dataclass
class JournalTrouble(Message):
    """The reader failed (permissions, disk); the dashboard shows it and keeps the last figures."""

    text: str

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, JournalTrouble)
