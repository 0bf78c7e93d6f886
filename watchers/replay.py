"""Feed a finished folder into a watched folder at a set pace, the way instruments write.

Each file is written in chunks under a temporary dot-name ending in ``.part`` (which the
watcher ignores), flushed to disk, then renamed to its final name in one ``os.replace`` —
so demos and tests go through the same path as a spectrometer that writes, then renames.
Files are fed in natural name order (digits compared as numbers).  A file already present
in the target with the same bytes is skipped, so a replay can be restarted.

An arrayed JCAMP-DX file (a whole series in one file: LINK blocks or NTUPLES pages,
:mod:`kinetics.spectra.arrayed`) is instead *appended to* under its final name, block by
block, as an instrument recording an arrayed acquisition does: each block in two writes
(so a reader also meets a half-written block), flushed and synced, then ``interval_s``
until the next block.  A target that already holds a beginning of the file is continued
where it stops.  ``SOURCE`` may also be the arrayed file itself.

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
    """The regular, non-temporary files of ``source`` matching ``include``, in name order
    (``source`` itself when it is a file)."""
    if Path(source).is_file():
        return [Path(source)]
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


def block_chunks(data: bytes) -> list[bytes]:
    """An arrayed JCAMP-DX file's bytes cut where an instrument appends: after each
    ``##END=`` that closes a block inside the file's link block, and before each
    ``##PAGE=`` of an NTUPLES that is not inside such a block (one page per time point).
    Joined, the pieces are ``data``; a last piece without data (the closing
    ``##END NTUPLES=``/``##END=`` lines) is joined to the one before."""
    cuts, offset, depth = [], 0, 0
    for line in data.splitlines(keepends=True):
        label = line.lstrip().upper()
        if label.startswith(b"##TITLE="):
            depth += 1
        elif label.startswith(b"##PAGE=") and depth == 1 and offset > 0:
            cuts.append(offset)
        offset += len(line)
        if label.startswith(b"##END="):
            depth -= 1
            if depth >= 1:
                cuts.append(offset)
    pieces, start = [], 0
    for cut in sorted(set(cuts)) + [len(data)]:
        if cut > start:
            pieces.append(data[start:cut])
            start = cut
    while len(pieces) > 1 and all(line.strip().upper().startswith(b"##END") or not line.strip()
                                  for line in pieces[-1].splitlines()):
        last = pieces.pop()
        pieces[-1] += last
    return pieces


def append_like_instrument(data: bytes, target: Path, interval_s: float = 0.0,
                           stop: threading.Event | None = None) -> int:
    """Append an arrayed file to ``target`` block by block (module docstring).

    Returns the number of blocks appended (0 when ``target`` already holds ``data``).
    """
    stop = stop or threading.Event()
    target = Path(target)
    present = target.read_bytes() if target.exists() else b""
    if present and not data.startswith(present):  # another file under that name: start again
        target.unlink()
        present = b""
    appended = 0
    offset = 0
    with open(target, "ab") as handle:
        for piece in block_chunks(data):
            start, offset = offset, offset + len(piece)
            if offset <= len(present):
                continue  # written by an earlier replay
            if stop.is_set():
                break
            rest = piece[max(0, len(present) - start):]
            half = len(rest) // 2
            for part in (rest[:half], rest[half:]):
                handle.write(part)
                handle.flush()
                os.fsync(handle.fileno())
            appended += 1
            stop.wait(interval_s)
    return appended


def _is_arrayed(path: Path) -> bool:
    try:
        from kinetics.spectra.arrayed import is_arrayed
    except ImportError:  # pragma: no cover - the reader is part of the package
        return False
    try:
        return bool(is_arrayed(path)) and path.suffix.lower() not in (".csv", ".tsv", ".txt")
    except Exception:  # noqa: BLE001 - not readable as arrayed: replayed as a whole file
        return False


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
        if _is_arrayed(path):
            blocks = append_like_instrument(data, destination, interval_s, stop)
            written += 1
            log.info("replayed %s (%d blocks appended)", path.name, blocks)
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
    parser.add_argument("--interval", type=float, default=1.0,
                        help="seconds between files (between blocks of an arrayed file)")
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
