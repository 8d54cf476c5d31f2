"""Run ngspice on decks: in parallel over the cores, cached by deck hash, with progress.

Each deck runs in its own temporary directory (removed afterwards) holding the deck and a
``.spiceinit`` with the settings of the model library's ``spinit``. Results are cached as JSON
under the user cache directory (``EDOPT_CACHE_DIR``, else ``$XDG_CACHE_HOME/edopt/spice``, else
``~/.cache/edopt/spice``), keyed by the SHA-256 of the deck text, the ngspice version, the
``spinit`` text and the model library's path, size and time stamp: a deck that changes in any
character runs again.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

from .deck import check_deck
from .setup import SpiceError, SpiceSetup, find_ngspice, ngspice_version

__all__ = ["RunResult", "cache_dir", "run_decks"]

_MEAS = re.compile(r"^\s*\.meas\w*\s+tran\s+(\S+)", re.IGNORECASE | re.MULTILINE)
_VALUE = re.compile(r"^\s*([a-z0-9_]+)\s*=\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)",
                    re.MULTILINE)
_FATAL = ("simulation interrupted", "unknown subckt", "could not find a valid modelname",
          "timestep too small", "no simulations run", "fatal error", "unknown model",
          "cannot open", "could not find include file", "singular matrix")
_WARN = ("warning", "could not find", "unknown", "floating", "no dc path", "singular",
         "not connected")
CACHE_FORMAT = 1


@dataclass
class RunResult:
    """Outcome of one deck: measured values (NaN where a measurement failed), warnings
    (ngspice's and the structural check's), the log, wall time and whether it came from the
    cache."""

    measures: dict[str, float]
    warnings: list[str] = field(default_factory=list)
    log: str = ""
    seconds: float = 0.0
    cached: bool = False
    key: str = ""

    def __getitem__(self, name: str) -> float:
        return self.measures[name.lower()]


def cache_dir() -> Path:
    """The directory of cached simulation results (created on demand)."""
    env = os.environ.get("EDOPT_CACHE_DIR")
    if env:
        base = Path(env).expanduser()
    else:
        xdg = os.environ.get("XDG_CACHE_HOME")
        base = (Path(xdg).expanduser() if xdg else Path.home() / ".cache") / "edopt" / "spice"
    return base


def _key(deck: str, version: str, spinit: str, lib: str) -> str:
    h = hashlib.sha256()
    for part in (f"edopt-spice-cache-{CACHE_FORMAT}", version, spinit, lib, deck):
        h.update(part.encode("utf-8"))
        h.update(b"\0")
    return h.hexdigest()


def _load_cached(path: Path) -> RunResult | None:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    measures = {k: (float("nan") if v is None else float(v)) for k, v in data["measures"].items()}
    return RunResult(measures, list(data.get("warnings", [])), data.get("log", ""),
                     float(data.get("seconds", 0.0)), True, path.stem)


def _store(path: Path, res: RunResult) -> None:
    data = {"measures": {k: (None if not math.isfinite(v) else v) for k, v in
                         res.measures.items()},
            "warnings": res.warnings, "log": res.log, "seconds": res.seconds}
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(f".tmp{os.getpid()}.{threading.get_ident()}")
        tmp.write_text(json.dumps(data), encoding="utf-8")
        tmp.replace(path)
    except OSError:
        pass  # a read-only cache only costs time


def parse_output(deck: str, output: str) -> tuple[dict[str, float], list[str]]:
    """Measured values and warnings from ngspice's batch output."""
    names = [n.lower() for n in _MEAS.findall(deck)]
    wanted = set(names)
    values: dict[str, float] = {}
    for m in _VALUE.finditer(output):
        if m.group(1) in wanted and m.group(1) not in values:
            values[m.group(1)] = float(m.group(2))
    warnings = []
    for line in output.splitlines():
        low = line.lower()
        if "measure" in low or ".meas" in low or "reference value" in low:
            continue
        if any(w in low for w in _WARN) or low.lstrip().startswith("error"):
            warnings.append(line.strip())
    failed = [n for n in names if n not in values]
    if failed:
        shown = ", ".join(failed[:8]) + (" ..." if len(failed) > 8 else "")
        warnings.append(f"{len(failed)} measurement(s) failed: {shown}")
    return {n: values.get(n, float("nan")) for n in names}, warnings


def _trim(log: str) -> str:
    """The log without the node-voltage listing of the initial solution, blank lines dropped."""
    out, skipping = [], False
    for line in log.splitlines():
        if "Initial Transient Solution" in line:
            out.append("Initial Transient Solution (node listing removed)")
            skipping = True
            continue
        if skipping and any(k in line for k in ("Reference value", "No. of Data", "Measurements")):
            skipping = False
        if not skipping and line.strip():
            out.append(line)
    return "\n".join(out)


def _keep_failed(key: str, deck: str, output: str) -> Path:
    where = cache_dir() / "failed"
    try:
        where.mkdir(parents=True, exist_ok=True)
        (where / f"{key[:16]}.sp").write_text(deck, encoding="utf-8")
        (where / f"{key[:16]}.log").write_text(output, encoding="utf-8")
    except OSError:
        pass
    return where / f"{key[:16]}.sp"


def _run_one(deck: str, exe: str, spinit: str, timeout: float) -> tuple[str, float]:
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="edopt-spice-") as tmp:
        Path(tmp, ".spiceinit").write_text(spinit, encoding="utf-8")
        Path(tmp, "deck.sp").write_text(deck, encoding="utf-8")
        env = dict(os.environ, HOME=tmp)
        try:
            out = subprocess.run([exe, "-b", "deck.sp"], cwd=tmp, env=env, capture_output=True,
                                 text=True, timeout=timeout, stdin=subprocess.DEVNULL)
        except subprocess.TimeoutExpired:
            raise SpiceError(f"ngspice did not finish within {timeout:g} s; split the deck or "
                             "raise the timeout") from None
    return out.stdout + "\n" + out.stderr, time.perf_counter() - t0


def run_decks(decks: Sequence[str] | str, setup: SpiceSetup | None = None, *,
              jobs: int | None = None, cache: bool = True, progress: bool = True,
              timeout: float = 1800.0, devices: Iterable[str] | None = None,
              label: str = "spice") -> list[RunResult]:
    """Simulate decks with ngspice, several at a time.

    Parameters
    ----------
    decks : deck texts (a single text is accepted).
    setup : supplies the ``spinit`` settings and the device names of the structural check.
    jobs : parallel ngspice processes (default: the number of cores).
    cache : reuse and store results in `cache_dir`.
    progress : report each finished run on stderr.
    devices : transistor names for the floating-node check (default the setup's NMOS/PMOS).

    Raises
    ------
    SpiceUnavailable : ngspice or the models are missing (with the install command).
    SpiceError : ngspice stopped with an error (the message quotes it).
    """
    if isinstance(decks, str):
        decks = [decks]
    setup = setup or SpiceSetup()
    exe = find_ngspice()
    spinit = setup.spinit()
    version = ngspice_version(exe)
    lib_path = setup.lib_path()
    st = lib_path.stat()
    lib_sig = f"{lib_path}:{st.st_size}:{st.st_mtime_ns}"
    devs = list(devices) if devices is not None else [setup.nmos, setup.pmos]
    jobs = max(1, min(jobs or os.cpu_count() or 1, len(decks) or 1))
    results: list[RunResult | None] = [None] * len(decks)
    lock = threading.Lock()
    t_start = time.perf_counter()
    done = [0, 0]

    def report(res: RunResult) -> None:
        with lock:
            done[0] += 1
            done[1] += res.cached
            if progress:
                how = "cached" if res.cached else f"{res.seconds:.1f} s"
                print(f"{label}: {done[0]}/{len(decks)} runs done ({how}; "
                      f"{time.perf_counter() - t_start:.0f} s elapsed)", file=sys.stderr,
                      flush=True)

    def work(i: int) -> None:
        deck = decks[i]
        key = _key(deck, version, spinit, lib_sig)
        path = cache_dir() / f"{key}.json"
        res = _load_cached(path) if cache else None
        if res is None:
            output, seconds = _run_one(deck, exe, spinit, timeout)
            low = output.lower()
            fatal = [ln.strip() for ln in output.splitlines()
                     if any(f in ln.lower() for f in _FATAL)]
            if fatal or "error" in low and "measurements for transient" not in low:
                first = fatal[0] if fatal else next(
                    ln.strip() for ln in output.splitlines() if "error" in ln.lower())
                kept = _keep_failed(key, deck, output)
                raise SpiceError(f"ngspice failed on deck {i + 1} of {len(decks)}: {first} "
                                 f"(deck and log kept in {kept})")
            measures, warnings = parse_output(deck, output)
            warnings = [f"check: {p}" for p in check_deck(deck, devs)] + warnings
            res = RunResult(measures, warnings, _trim(output), seconds, False, key)
            if cache:
                _store(path, res)
        results[i] = res
        report(res)

    if progress and len(decks):
        print(f"{label}: {len(decks)} ngspice run(s) on {jobs} core(s)", file=sys.stderr,
              flush=True)
    if jobs == 1:
        for i in range(len(decks)):
            work(i)
    else:
        with ThreadPoolExecutor(max_workers=jobs) as pool:
            for f in [pool.submit(work, i) for i in range(len(decks))]:
                f.result()
    return [r for r in results if r is not None]
