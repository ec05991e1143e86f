"""A section heading bound to the start of its first paragraph, for flows where reportlab's
``keepWithNext`` and ``KeepTogether`` do not hold (inside ``BalancedColumns``, a nested
``KeepTogether`` claims a whole page, and ``keepWithNext`` is not looked at).

:class:`HeadedParagraph` wraps as the heading plus the paragraph; when it does not fit, it splits
inside the paragraph (the heading and the paragraph's first lines stay together) or, when not even
the heading and two lines fit, not at all, so the heading moves to the next column or page.
"""

from __future__ import annotations

import copy

from reportlab.platypus import Flowable

__all__ = ["HeadedParagraph"]


class HeadedParagraph(Flowable):  # type: ignore[misc]
    """``heading`` drawn above ``body``; the two never part at a column or page break."""

    def __init__(self, heading: Flowable, body: Flowable) -> None:
        super().__init__()
        self.heading = heading
        self.body = body
        self._sizes: tuple[float, float] = (0.0, 0.0)

    def __deepcopy__(self, memo: dict[int, object]) -> HeadedParagraph:
        """Parts copied as they copy themselves (BalancedColumns deep-copies at every trial)."""
        return HeadedParagraph(copy.deepcopy(self.heading, memo), copy.deepcopy(self.body, memo))

    def _gap(self) -> float:
        return float(self.heading.getSpaceAfter()) + float(self.body.getSpaceBefore())

    def wrap(self, available_width: float, available_height: float) -> tuple[float, float]:
        _, head = self.heading.wrap(available_width, available_height)
        _, body = self.body.wrap(available_width, available_height)
        self._sizes = (head, body)
        self.width = available_width
        self.height = head + self._gap() + body
        return self.width, self.height

    def split(self, available_width: float, available_height: float) -> list[Flowable]:
        head = self.heading.wrap(available_width, available_height)[1]
        room = available_height - head - self._gap()
        parts = self.body.split(available_width, room) if room > 0 else []
        if len(parts) < 2:
            return []  # not even the heading and the first lines fit: all of it moves on
        return [HeadedParagraph(self.heading, parts[0]), *parts[1:]]

    def getSpaceBefore(self) -> float:
        return float(self.heading.getSpaceBefore())

    def getSpaceAfter(self) -> float:
        return float(self.body.getSpaceAfter())

    def draw(self) -> None:
        head = self._sizes[0]
        self.heading.drawOn(self.canv, 0, self.height - head)
        self.body.drawOn(self.canv, 0, 0)
