"""Child process for the crash test: journals points forever, printing each index once it is durable.

Usage: python crash_child.py <journal path> <run file path>. The parent kills it with SIGKILL.
"""

from __future__ import annotations

import sys

from store_samples import planned_frequency_hz, rc_prediction, sample_metadata, sample_point

from sweeper.store.journal import Journal
from sweeper.store.runfile import RunWriter, run_header


def main(journal_path: str, run_path: str) -> None:
    freq = planned_frequency_hz()
    header = run_header(sample_metadata("STN-A3-crash"), freq, rc_prediction(freq))
    journal = Journal.create(journal_path, header)
    writer = RunWriter.from_header(run_path, header)
    index = 0
    while True:
        point = sample_point(index)
        journal.append_point(point)  # returns after write + fsync
        print(index, flush=True)
        writer.append(point)
        index += 1


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
