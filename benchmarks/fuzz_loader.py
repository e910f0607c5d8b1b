"""Coverage-guided fuzzing of the model loader with atheris (not part of the test suite).

Feeds mutated bytes to :func:`crn.io.models.load_model` as TOML, JSON and SBML model
files (the first byte picks the format; the seeds are the bundled models and their
exports). Every input must load or raise CRNError (a one-line exit 2 on the command
line); anything else is a finding: atheris stops and writes the input to
``crash-*``. Findings are kept as regression cases in ``tests/test_fuzz_inputs.py``.

Install and run (from the repository root)::

    pip install -e '.[fuzz]'
    python benchmarks/fuzz_loader.py -max_total_time=120 -rss_limit_mb=2048
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

import atheris

with atheris.instrument_imports():
    from crn.core.errors import CRNError
    from crn.io.contract import network_to_json
    from crn.io.models import load_model
    from crn.io.sbml import network_to_sbml

SUFFIXES = (".toml", ".json", ".xml")
FOLDER = Path(tempfile.mkdtemp(prefix="crn-fuzz-"))


def seeds(folder: Path) -> Path:
    """Write the bundled models and their JSON and SBML exports as the starting corpus."""
    corpus = folder / "corpus"
    corpus.mkdir(exist_ok=True)
    for path in sorted(Path("models").glob("*.toml")):
        text = path.read_bytes()
        (corpus / f"{path.stem}.toml").write_bytes(b"\x00" + text)
        try:
            net = load_model(path).network
        except CRNError:
            continue
        (corpus / f"{path.stem}.json").write_bytes(b"\x01" + network_to_json(net).encode())
        (corpus / f"{path.stem}.xml").write_bytes(b"\x02" + network_to_sbml(net).encode())
    return corpus


def one_input(data: bytes) -> None:
    if not data:
        return
    path = FOLDER / f"model{SUFFIXES[data[0] % len(SUFFIXES)]}"
    path.write_bytes(data[1:])
    try:
        load_model(path)
    except CRNError:
        pass


def main() -> None:
    corpus = seeds(FOLDER)
    argv = [sys.argv[0], *sys.argv[1:], str(corpus)]
    if not any(a.startswith(("-runs", "-max_total_time")) for a in argv):
        argv.insert(1, "-max_total_time=60")
    print(f"corpus in {corpus}; pid {os.getpid()}", flush=True)
    atheris.Setup(argv, one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
