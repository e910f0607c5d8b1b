"""Results files of long sweeps: append each finished cell durably, resume after a crash.

A sweep writes ``<out>/<name>.jsonl``: a header line (seed entropy and the
sweep's parameters) and then one JSON line per finished cell, each flushed and
fsync'ed as the cell finishes. Resuming reads the finished cells back (a torn
last line from a killed process is dropped) and refuses a file whose header
does not match the sweep. Whole output files (tables, figures) go through
:func:`write_atomic`: written to a temporary file and renamed into place, so a
reader sees the old file or the new one, never a half-written one.
"""

from __future__ import annotations

import json
import os
import warnings
from pathlib import Path

from crn.core.errors import CRNError
from crn.io.atomic import write_atomic
from crn.io.jsonable import to_jsonable

__all__ = ["SweepStore"]

_FORMAT = "crn-sweep/1"


class SweepStore:
    """An append-only results file for one sweep.

    Parameters
    ----------
    out : str or Path
        Directory of the results (created if missing).
    name : str
        File stem: the results go to ``<out>/<name>.jsonl``.
    parameters : dict
        Everything that determines the sweep's numbers (JSON-serialisable);
        a resumed sweep must have the same.
    seed_entropy : int
        Root entropy of the sweep's SeedSequence, recorded in a new file. On
        resume the file's entropy is adopted (:attr:`seed_entropy`).
    check_seed : bool
        On resume, refuse a file recorded with another entropy (the user gave
        a seed explicitly).
    resume : bool
        Keep the finished cells of an existing file (else it is replaced,
        with a warning when it held cells).

    Raises
    ------
    CRNError
        On resume, when the file's header records other parameters or another
        seed, or the file is not a results file.
    """

    def __init__(self, out, name: str, parameters: dict, seed_entropy: int, *,
                 resume: bool = False, check_seed: bool = False):
        self.path = Path(out) / f"{name}.jsonl"
        self.parameters = to_jsonable(dict(parameters))
        self.finished: list[dict] = []
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as err:
            raise CRNError(f"{self.path.parent}: cannot create the folder: {err.strerror}") from err
        if resume and self.path.exists():
            header, self.finished = self._read()
            if header.get("parameters") != self.parameters:
                raise CRNError(f"{self.path}: cannot resume, the file was written for other "
                               f"parameters ({_diff(header.get('parameters'), self.parameters)})")
            recorded = header.get("seed_entropy")
            if check_seed and int(seed_entropy) != recorded:
                raise CRNError(f"{self.path}: cannot resume with another seed "
                               f"(file: {recorded}, given: {seed_entropy})")
            self.seed_entropy = recorded
        else:
            if self.path.exists() and self.path.stat().st_size > 0 and not resume:
                warnings.warn(f"{self.path} exists and is replaced (use --resume to continue it)",
                              stacklevel=2)
            self.seed_entropy = int(seed_entropy)
            header = {"format": _FORMAT, "kind": "header", "seed_entropy": self.seed_entropy,
                      "parameters": self.parameters}
            write_atomic(self.path, json.dumps(header) + "\n")

    def _read(self):
        text = self.path.read_text(encoding="utf-8")
        complete, _, torn = text.rpartition("\n")
        if torn:
            # a process killed mid-write left a partial line: cut it off before appending
            with open(self.path, "r+", encoding="utf-8") as fh:
                fh.truncate(len(complete.encode("utf-8")) + (1 if complete else 0))
                fh.flush()
                os.fsync(fh.fileno())
        lines = [line for line in complete.split("\n") if line.strip()] if complete else []
        if not lines:
            raise CRNError(f"{self.path}: empty results file, cannot resume")
        try:
            records = [json.loads(line) for line in lines]
        except json.JSONDecodeError as err:
            raise CRNError(f"{self.path}: not a results file ({err})") from err
        header = records[0]
        if (not isinstance(header, dict) or header.get("format") != _FORMAT
                or header.get("kind") != "header"):
            raise CRNError(f"{self.path}: not a results file (no {_FORMAT} header)")
        for number, record in enumerate(records[1:], start=2):
            if not isinstance(record, dict) or (record.get("kind") == "cell"
                                                and not isinstance(record.get("cell"), dict)):
                raise CRNError(f"{self.path}:{number}: not a results record")
        return header, [r["cell"] for r in records[1:] if r.get("kind") == "cell"]

    def append(self, cell: dict) -> None:
        """Append one finished cell (a JSON-serialisable dict) durably."""
        record = {"kind": "cell", "cell": to_jsonable(cell)}
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(json.dumps(record) + "\n")
            fh.flush()
            os.fsync(fh.fileno())
        self.finished.append(record["cell"])


def _diff(old, new) -> str:
    if not isinstance(old, dict):
        return "no parameters recorded"
    keys = sorted(set(old) | set(new))
    changed = [f"{k}: {old.get(k)!r} -> {new.get(k)!r}" for k in keys if old.get(k) != new.get(k)]
    return "; ".join(changed) or "unknown difference"
