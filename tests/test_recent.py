"""The one bounded memo (``seqtest.core.recent.Recent``): least recently used first out
(the usual LRU rule; common practice), counts of hits and misses, safe across threads."""

from __future__ import annotations

import threading

import pytest

from seqtest.core.recent import Recent


def test_the_least_recently_used_goes_first() -> None:
    memo: Recent[str, int] = Recent(2)
    memo.put("a", 1)
    memo.put("b", 2)
    assert memo.get("a") == 1          # "a" is now the most recent
    memo.put("c", 3)                   # so "b" goes
    assert memo.get("b") is None and memo.get("a") == 1 and memo.get("c") == 3
    assert len(memo) == 2 and (memo.hits, memo.misses) == (3, 1)
    memo.clear()
    assert len(memo) == 0 and (memo.hits, memo.misses) == (0, 0)


def test_size_is_checked() -> None:
    with pytest.raises(ValueError, match="size: got 0"):
        Recent(0)


def test_threads_never_see_more_than_the_size() -> None:
    memo: Recent[int, int] = Recent(50)
    errors: list[str] = []

    def work(offset: int) -> None:
        for i in range(2000):
            memo.put(offset + i % 97, i)
            got = memo.get(offset + i % 97)
            if got is not None and not 0 <= got < 2000:
                errors.append(f"bad value {got}")
            if len(memo) > 50:
                errors.append(f"size {len(memo)}")

    threads = [threading.Thread(target=work, args=(1000 * k,)) for k in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == [] and len(memo) == 50
