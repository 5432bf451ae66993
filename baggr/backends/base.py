"""What a backend is: something that grows members start..stop-1 and yields them in member order."""
from __future__ import annotations

from collections.abc import Iterator

from baggr.backends.member import Grower, MemberResult


class Backend:
    """Grows members with `grower` and hands their results back in member order.

    A backend may grow members ahead of the one it yields (bounded: the caller's memory must not
    grow with members), and may grow any member twice: each is a pure function of m, so the fold
    stays exact. close() cancels what is in flight; the engine calls it when it stops early.
    """

    def members(self, grower: Grower, start: int, stop: int) -> Iterator[MemberResult]:
        raise NotImplementedError

    def close(self) -> None:
        """Cancel members in flight and free the backend's workers."""
