"""Test helper for test_journal_durability: write decisions until killed.

Usage: ``python journal_writer.py JOURNAL [--lock]``. With ``--lock`` it first takes the session lock, as
the inspector does (holdfast.review.lock). Prints ``ready`` once the journal is open, then for step 0, 1,
2, ... records :func:`planned` ``(step)`` (every fourth step as one bulk action of three rows) and, only after
the write has returned, prints ``committed <row_id>`` for each row of the step, flushed.
"""

from __future__ import annotations

import sys

from holdfast.review.journal import Journal

KINDS = ("relabel", "confirm", "exclude", "defer")
LABELS = ("apple", "pear", "quince")


def planned(step: int) -> list[tuple[str, str, str | None, str | None]]:
    """The changes written at ``step``: (row_id, decision, new_label, note); row ids never repeat."""
    count = 3 if step % 4 == 3 else 1
    out = []
    for k in range(count):
        row_id = f"s{step}-{k}"
        decision = KINDS[(step + k) % len(KINDS)]
        label = LABELS[step % len(LABELS)] if decision == "relabel" else None
        note = f"crate {step}/{k} — bruised" if step % 3 == 0 else None
        out.append((row_id, decision, label, note))
    return out


def main(path: str, lock: bool = False) -> None:
    if lock:
        from holdfast.review.lock import acquire

        held = acquire(path)
        assert held is not None
    journal = Journal.open(path)
    print("ready", flush=True)
    step = 0
    while True:
        changes = planned(step)
        if len(changes) == 1:
            journal.record(*changes[0])
        else:
            journal.record_many(changes)
        sys.stdout.write("".join(f"committed {c[0]}\n" for c in changes))
        sys.stdout.flush()
        step += 1


if __name__ == "__main__":
    main(sys.argv[1], lock="--lock" in sys.argv[2:])
