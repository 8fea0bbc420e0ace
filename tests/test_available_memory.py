"""The refinement loop's reading of the available memory: reused for MEMORY_READING_AGE_S, then
read again (the reading itself: /proc/meminfo's MemAvailable, Linux's proc(5) manual page)."""

from __future__ import annotations

from elopt.physics import refinement


def test_reading_reused_within_its_age_and_renewed_after(monkeypatch):
    reads = []

    def fake_read() -> int:
        reads.append(1)
        return 1000 * len(reads)

    clock = [100.0]
    monkeypatch.setattr(refinement, "_read_available_memory_bytes", fake_read)
    monkeypatch.setattr(refinement.time, "monotonic", lambda: clock[0])
    monkeypatch.setattr(refinement, "_memory_reading", [-float("inf"), 0.0])
    assert refinement.available_memory_bytes() == 1000
    clock[0] += 0.5 * refinement.MEMORY_READING_AGE_S
    assert refinement.available_memory_bytes() == 1000
    assert len(reads) == 1
    clock[0] += refinement.MEMORY_READING_AGE_S
    assert refinement.available_memory_bytes() == 2000
    assert len(reads) == 2


def test_reading_is_memavailable_in_bytes():
    # proc(5): "MemAvailable %lu" in kB; 4 GiB is the stated fallback where it cannot be read.
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            lines = [ln for ln in fh if ln.startswith("MemAvailable:")]
    except OSError:
        lines = []
    got = refinement._read_available_memory_bytes()
    if not lines:
        assert got == 4 * 1024**3
        return
    kb = int(lines[0].split()[1])
    # The figure moves between the two reads; a few MB of drift is the machine, not the parse.
    assert abs(got - kb * 1024) < 64 * 1024**2
    assert got % 1024 == 0
