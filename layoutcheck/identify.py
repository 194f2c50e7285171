"""Which template pages a page is compared with."""

from __future__ import annotations

from typing import Iterator, Sequence

from .elements import PageElements
from .template import Template, TemplatePage


def candidates(templates: Sequence[Template], found: PageElements) -> Iterator[tuple[Template, TemplatePage]]:
    """Every page of every template, in order."""
    for t in templates:
        for p in t.pages:
            yield t, p
