"""The cache of the last few results by identity (gen/recent.py)."""

from __future__ import annotations

from orbitfix.gen.recent import Recent


class Key:
    """An argument whose equal copies must not share a result (every Key equals every other)."""

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Key)

    __hash__ = None  # type: ignore[assignment]


def test_a_result_is_computed_once_per_object_for_the_last_few() -> None:
    calls = []
    recent = Recent(lambda key: calls.append(key) or len(calls), kept=2)
    a, b, c = Key(), Key(), Key()
    assert recent(a) == 1 and recent(a) == 1 and len(calls) == 1
    # an equal but other object is computed afresh (seeded fault: a cache by equality reuses 1)
    assert recent(b) == 2 and len(calls) == 2
    assert recent(c) == 3 and recent(b) == 2  # a, the oldest, left when c came
    assert recent(a) == 4 and len(calls) == 4
