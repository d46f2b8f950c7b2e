"""Messages the whole dashboard app handles (widgets' own messages are nested in their classes).

The events worker folds each batch into :class:`heft.tui.state.DashboardState` and posts one
:class:`StateChanged` naming the areas the batch touched; the app's handler hands the new
values of just those areas to its reactive attributes, and from there to the widgets bound to them.
"""

from __future__ import annotations

from collections.abc import Iterable

from textual.message import Message

from heft.tui.state import Area


class StateChanged(Message):
    """Part of the dashboard state changed: ``areas`` says which parts."""

    def __init__(self, areas: Iterable[Area]) -> None:
        super().__init__()
        self.areas = frozenset(areas)
