"""Feed a finished folder into a watched folder at a set pace, the way instruments write.

Each file is written in chunks under a temporary dot-name ending in ``.part`` (which the
watcher ignores), flushed to disk, then renamed to its final name in one ``os.replace`` —
so demos and tests go through the same path as a spectrometer that writes, then renames.
Files are fed in natural name order (digits compared as numbers).  A file already present
in the target with the same bytes is skipped, so a replay can be restarted.

Run on its own: ``python -m watchers.replay SOURCE TARGET --interval 2``.
"""

from __future__ import annotations

import argparse
import fnmatch
import logging
import os
import sys
import threading
from pathlib import Path

from kinetics.errors import InputFileError
from watchers.folder import _natural_key, check_folder, is_temporary

log = logging.getLogger(__name__)


def files_to_replay(source: Path, include: tuple[str, ...] = ("*",)) -> list[Path]:
    """The regular, non-temporary files of ``source`` matching ``include``, in name order."""
    source = check_folder(source)
    found = [path for path in source.iterdir()
             if path.is_file() and not is_temporary(path.name)
             and any(fnmatch.fnmatch(path.name, pattern) for pattern in include)]
    return sorted(found, key=lambda path: _natural_key(path.name))


def write_like_instrument(data: bytes, target: Path, chunks: int = 10, pause_s: float = 0.0,
                          stop: threading.Event | None = None) -> None:
    """Write ``data`` to ``target`` in ``chunks`` pieces under a temporary name, then rename."""
    temporary = target.with_name(f".{target.name}.part")
    stop = stop or threading.Event()
    size = len(data)
    step = max(1, -(-size // max(1, chunks)))
    with open(temporary, "wb") as handle:
        for offset in range(0, max(size, 1), step):
            handle.write(data[offset:offset + step])
            handle.flush()
            if pause_s > 0 and offset + step < size:
                stop.wait(pause_s)
        os.fsync(handle.fileno())
    os.replace(temporary, target)


def replay(source: Path, target: Path, interval_s: float, chunks: int = 10,
           chunk_pause_s: float = 0.0, include: tuple[str, ...] = ("*",),
           stop: threading.Event | None = None) -> int:
    """Copy every file of ``source`` into ``target``, one every ``interval_s`` seconds.

    Returns
    -------
    int
        Number of files written (files already there with the same bytes are skipped).
    """
    stop = stop or threading.Event()
    target = Path(target)
    target.mkdir(parents=True, exist_ok=True)
    written = 0
    for path in files_to_replay(Path(source), include):
        if stop.is_set():
            break
        data = path.read_bytes()
        destination = target / path.name
        if destination.exists() and destination.read_bytes() == data:
            continue
        write_like_instrument(data, destination, chunks, chunk_pause_s, stop)
        written += 1
        log.info("replayed %s", path.name)
        stop.wait(interval_s)
    return written


class ReplayThread(threading.Thread):
    """:func:`replay` in a daemon thread; ``finished`` is set when it is done."""

    def __init__(self, source: Path, target: Path, interval_s: float, include=("*",)):
        super().__init__(daemon=True, name="replay")
        files_to_replay(Path(source), include)  # a missing source fails here, at once
        self.args = (Path(source), Path(target), float(interval_s))
        self.include = tuple(include)
        self.stop_event = threading.Event()
        self.finished = threading.Event()
        self.error: BaseException | None = None

    def run(self) -> None:
        try:
            replay(*self.args, include=self.include, stop=self.stop_event)
        except BaseException as error:  # reported by the caller, not lost in the thread
            self.error = error
        finally:
            self.finished.set()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m watchers.replay", description=__doc__.split("\n")[0])
    parser.add_argument("source", type=Path)
    parser.add_argument("target", type=Path)
    parser.add_argument("--interval", type=float, default=1.0, help="seconds between files")
    parser.add_argument("--chunks", type=int, default=10)
    parser.add_argument("--chunk-pause", type=float, default=0.0, help="seconds between chunks")
    args = parser.parse_args(argv)
    try:
        count = replay(args.source, args.target, args.interval, args.chunks, args.chunk_pause)
    except InputFileError as error:
        print(f"replay: error: {error}", file=sys.stderr)
        return 2
    print(f"replayed {count} files")
    return 0


if __name__ == "__main__":
    sys.exit(main())
