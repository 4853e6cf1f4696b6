"""Which instance takes which sites and sources when several share one store.

Several ``fogwatch run`` instances on one PostgreSQL store each evaluate a share of the
sites (and poll a share of the sources). The share is a stable partition: an item
belongs to instance ``hash(id) mod count``, with the hash a fixed function of the id's
bytes (BLAKE2b, docs/references.md [RFC 7693]), so it is the same on every machine,
Python version and restart — Python's own ``hash()`` of a string is salted per process
and would move the sites at every restart. A site is evaluated by exactly one instance, and none is
missed, whatever the ids; adding an instance moves about ``1/count`` of them.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from typing import Protocol, TypeVar

__all__ = ["instance_of", "share"]


class _HasId(Protocol):
    @property
    def id(self) -> str: ...


T = TypeVar("T", bound=_HasId)


def instance_of(item_id: str, count: int) -> int:
    """The instance (0 … count-1) that takes ``item_id``.

    >>> [instance_of(site, 2) for site in ("marsh-gate", "east-jetty", "hill-barn")]
    [1, 0, 1]
    >>> instance_of("marsh-gate", 1)
    0
    """
    if count < 1:
        raise ValueError(f"count must be at least 1, got: {count}")
    digest = hashlib.blake2b(item_id.encode("utf-8"), digest_size=8).digest()
    return int.from_bytes(digest, "big") % count


def share(items: Sequence[T], index: int, count: int) -> tuple[T, ...]:
    """The items (sites or sources) instance ``index`` of ``count`` takes, in their order.

    >>> class Item:
    ...     def __init__(self, id): self.id = id
    >>> [i.id for i in share([Item("marsh-gate"), Item("east-jetty")], 0, 2)]
    ['east-jetty']
    """
    if count == 1:
        return tuple(items)
    return tuple(item for item in items if instance_of(item.id, count) == index)
