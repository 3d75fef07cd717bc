"""The allocator thresholds a chunk runs under on a Dask worker (inhibkin/engine/allocation.py)."""

import pytest

from inhibkin.engine import allocation


class _FakeLibc:
    """Stands in for glibc: lists the mallopt and malloc_trim calls made."""

    def __init__(self):
        self.calls = []

    def mallopt(self, parameter, value):
        self.calls.append(("mallopt", parameter, value))
        return 1

    def malloc_trim(self, pad):
        self.calls.append(("malloc_trim", pad))
        return 1


@pytest.fixture
def libc(monkeypatch):
    fake = _FakeLibc()
    monkeypatch.setattr(allocation, "_glibc", lambda: fake)
    return fake


def test_thresholds_are_raised_in_the_block_and_the_environments_come_back(libc, monkeypatch):
    # Dask's nanny environment (distributed.nanny.pre-spawn-environ of distributed
    # 2026.8.0: MALLOC_TRIM_THRESHOLD_=65536); glibc's mmap threshold then stays at its
    # 128 KB default (malloc/malloc.c, DEFAULT_MMAP_THRESHOLD).
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    monkeypatch.delenv("MALLOC_MMAP_THRESHOLD_", raising=False)
    with allocation.engine_thresholds():
        inside = list(libc.calls)
    assert inside == [("mallopt", -3, 32 * 1024 * 1024), ("mallopt", -1, 64 * 1024 * 1024)]
    assert libc.calls[len(inside):] == [("mallopt", -1, 65536), ("mallopt", -3, 128 * 1024),
                                        ("malloc_trim", 0)]


def test_nested_blocks_restore_once_when_the_last_ends(libc, monkeypatch):
    # Several chunks in threads of one worker: the first to end must not lower the
    # thresholds under the others.
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    monkeypatch.setenv("MALLOC_MMAP_THRESHOLD_", "262144")
    with allocation.engine_thresholds():
        with allocation.engine_thresholds():
            pass
        assert not any(call[0] == "malloc_trim" for call in libc.calls)
    assert libc.calls[-3:] == [("mallopt", -1, 65536), ("mallopt", -3, 262144),
                               ("malloc_trim", 0)]


def test_nothing_is_set_without_the_environment_variable(libc, monkeypatch):
    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)
    with allocation.engine_thresholds():
        pass
    assert libc.calls == []


def test_the_environment_comes_back_when_the_chunk_raises(libc, monkeypatch):
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    with pytest.raises(RuntimeError):
        with allocation.engine_thresholds():
            raise RuntimeError("a chunk failed")
    assert libc.calls[-1] == ("malloc_trim", 0)


def test_glibc_takes_the_thresholds():
    # The real C library, where it is glibc: mallopt returns 1 when it accepts a value.
    libc = allocation._glibc()
    if libc is None:
        pytest.skip("the C library is not glibc")
    assert libc.mallopt(-3, 32 * 1024 * 1024) == 1
    assert libc.mallopt(-3, 128 * 1024) == 1
