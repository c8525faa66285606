"""Writing results: JSON, CSV, Touchstone and plots. The only layer besides the CLI that writes files."""

from __future__ import annotations

import contextlib
import csv
import fcntl
import hashlib
import json
import math
import os
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np

from simloop import __version__
from simloop.errors import SpecError
from simloop.impedance import RELIABLE_BELOW, SweepResult


def complex_pairs(z) -> list:
    """Complex array → nested [re, im] pairs (JSON has no complex numbers)."""
    z = np.asarray(z)
    if z.ndim == 0:
        return [float(z.real), float(z.imag)]
    return [complex_pairs(v) for v in z]


def number_or_none(x) -> float | None:
    """A finite number as float; None, NaN and ±inf as None (JSON null: a quantity not determined)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def finite_json(value):
    """Non-finite floats become null (JSON has no NaN); everything else is kept."""
    if isinstance(value, dict):
        return {k: finite_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [finite_json(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value




def write_json(path: Path, data: dict) -> Path:
    """Write JSON atomically (a temporary file of a unique name beside it, then rename).

    A crash never leaves half a file, two writers never share a temporary, and a symlink planted
    anywhere near cannot redirect the write. A value that is not a finite number is written as
    null: a quantity the tool could not determine is reported as absent, never as a number.
    """
    return _write_atomic(Path(path), (json.dumps(finite_json(data), indent=1, allow_nan=False) + "\n").encode())


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _write_atomic(path: Path, blob: bytes) -> Path:
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}-", suffix=".tmp")
    try:
        os.fchmod(fd, 0o666 & ~_umask())  # as an ordinary file would be (mkstemp makes it private)
        with os.fdopen(fd, "wb") as fh:
            fh.write(blob)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return path


# ------------------------------------------------------------------------------------------------
# Output folders: checked before any work, written as one consistent set per command.
# ------------------------------------------------------------------------------------------------

MANIFEST = "manifest.json"
_LOCK = ".simloop.lock"
_STAGE_PREFIX = ".simloop-stage-"
#: Staging folders older than this belong to a run that was killed while writing. [s]
_STALE_STAGE_S = 3600.0
#: Files an older sweep (before the manifest) may have left that a new one must not leave beside its set.
_LEGACY = {"sweep": ("tap-*.s1p", "taps.s*p")}


def check_out_dir(out) -> Path:
    """Make sure results can be written into ``out`` before any long work; nothing is created.

    Raises
    ------
    SpecError
        Key ``--out``: empty, an existing file or device, or a place where no folder can be made
        or written (the nearest existing folder above it is probed with a temporary file).
    """
    if out is None or str(out).strip() == "":
        raise SpecError("--out", "'' is empty; give a folder (or leave the option out for results/<name>/)")
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise SpecError("--out", f"{str(out)!r} exists and is not a folder")
    probe_dir = out.absolute()
    while not probe_dir.exists():
        probe_dir = probe_dir.parent
    if not probe_dir.is_dir():
        raise SpecError("--out", f"{str(out)!r} cannot be made: {str(probe_dir)!r} is not a folder")
    try:
        fd, probe = tempfile.mkstemp(dir=probe_dir, prefix=".simloop-probe-")
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise SpecError("--out", f"{str(out)!r} cannot be written: {exc.strerror or exc} "
                                 f"(in {str(probe_dir)!r})") from None
    return out


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _read_manifest(out: Path) -> dict:
    try:
        data = json.loads((out / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return data if isinstance(data, dict) and isinstance(data.get("commands"), dict) else {}


@contextlib.contextmanager
def _locked(out: Path):
    """An exclusive lock on the output folder (several runs into one folder publish in turn)."""
    fd = os.open(out / _LOCK, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW, 0o644)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)  # releases the lock


def _publish(stage: Path, out: Path, command: str, info: dict) -> list[Path]:
    """Move a finished set from ``stage`` into ``out``, drop this command's files of an earlier
    run that are not in the new set, and record the set with hashes in the manifest."""
    names = sorted(p.name for p in stage.iterdir() if p.is_file() and not p.is_symlink())
    files = {n: {"sha256": _sha256(stage / n), "bytes": (stage / n).stat().st_size} for n in names}
    with _locked(out):
        manifest = _read_manifest(out)
        commands = manifest.get("commands", {})
        before = set(commands.get(command, {}).get("files", {}))
        if command not in commands:
            before |= {p.name for pattern in _LEGACY.get(command, ()) for p in out.glob(pattern)}
        kept = {n for c, entry in commands.items() if c != command for n in entry.get("files", {})}
        for n in names:
            os.replace(stage / n, out / n)
        for n in sorted(before - set(names) - kept):
            with contextlib.suppress(FileNotFoundError, IsADirectoryError):
                (out / n).unlink()
        commands[command] = {**info, "written_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                             "files": files}
        write_json(out / MANIFEST, {"simloop_version": __version__, "commands": commands})
    return [out / n for n in names]


def _clean_stale_stages(out: Path) -> None:
    now = time.time()
    for old in out.glob(_STAGE_PREFIX + "*"):
        with contextlib.suppress(OSError):
            if old.is_dir() and not old.is_symlink() and now - old.lstat().st_mtime > _STALE_STAGE_S:
                shutil.rmtree(old)


@contextlib.contextmanager
def output_set(out, command: str, info: dict | None = None):
    """Write one command's outputs as a set: yields a private staging folder inside ``out``.

    Write every file of the set into the yielded folder. When the block ends normally the files
    are renamed into ``out`` together (each rename atomic; concurrent runs publish one after the
    other under a lock), files this command wrote in an earlier run and not now are removed, and
    ``manifest.json`` lists the current set of every command with SHA-256 hashes. When the block
    raises, or the process is killed, nothing in ``out`` changes. The staging folder is created
    with a fresh random name (mode 0700), so nothing planted in ``out`` can redirect a write.

    Yields
    ------
    (stage, published) : (Path, list of Path)
        The staging folder, and a list that holds the published paths in ``out`` once the block
        has ended.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    _clean_stale_stages(out)
    stage = Path(tempfile.mkdtemp(dir=out, prefix=_STAGE_PREFIX))
    published: list[Path] = []
    try:
        yield stage, published
        published.extend(_publish(stage, out, command, info or {}))
    finally:
        shutil.rmtree(stage, ignore_errors=True)


def mesh_summary(result: SweepResult) -> dict:
    mesh, geom = result.mesh, result.geometry
    return {
        "segments": mesh.n_segments,
        "wires": int(mesh.segments.size),
        "wire_length_m": geom.wire_length_m,
        "winding_length_m": geom.winding_length_m,
        "lead_length_m": geom.lead_length_m,
        "quality": mesh.quality,
        "segment_target_m": mesh.target_m,
        "segment_min_m": mesh.shortest_m,
        "segment_max_m": mesh.longest_m,
        "winding_segment_m": mesh.winding_segment_m,
        "floor_trusted_hz": mesh.floor_frequency_hz(),
        "floor_absolute_hz": mesh.floor_frequency_hz(5e-5),
        "rules": [{"rule": r.name, "key": r.key, "status": r.status, "detail": r.detail} for r in result.rules],
    }


def sweep_dict(result: SweepResult, z0: float) -> dict:
    """Everything `simloop sweep` reports, as JSON-ready data (keys of DESIGN §6)."""
    taps = {}
    for i, n in enumerate(result.tap_turns):
        zi = result.tap_impedance(i)
        taps[str(n)] = {
            "turns": n,
            "impedance_ohm": complex_pairs(zi),
            "inductance_h": float(result.inductance_h[i]),
            "inductance_error": float(result.inductance_error[i]),
            "quasi_static_inductance_h": float(result.quasi_static_inductance_h[i]),
            "junction_correction": float(result.junction_correction[i]),
            "uncorrected_inductance_h": float(result.uncorrected_inductance_h[i]),
            "self_resonance_hz": number_or_none(result.self_resonance_hz[i]),
            "self_capacitance_f": number_or_none(result.self_capacitance_f[i]),
            "reliable": [bool(v) for v in result.reliable[:, i]],
            "source": [str(s) for s in result.source],
            "error_estimate": [float(e) for e in result.error_estimate[:, i]],
            "mom_difference": number_or_none(result.mom_difference[i]) if result.mom_difference.size else None,
            "mom_self_resonance_hz": (number_or_none(result.mom_self_resonance_hz[i])
                                      if result.mom_self_resonance_hz.size else None),
        }
    m = result.model
    return {
        "simloop_version": __version__,
        "command": "sweep",
        "name": result.name,
        "frequencies_hz": [float(f) for f in result.frequencies_hz],
        "reference_impedance_ohm": z0,
        "reliable_below": RELIABLE_BELOW,
        "taps": taps,
        "impedance_matrix_ohm": complex_pairs(result.z_ohm),
        "model": {
            "form": "Y = (R_s + jωL0)^-1 + jωC, fitted to ω·Im Y = -L0^-1 + ω²C of circuit solves",
            "fit_frequencies_hz": [float(f) for f in m.fit_hz],
            "fit_residual": m.fit_residual,
            "extrapolation_spread": m.extrapolation_spread,
            "inductance_matrix_h": m.inductance_h.tolist(),
            "capacitance_matrix_f": m.capacitance_f.tolist(),
            "note": result.window_note,
        },
        "circuit": {
            "solver": "PEEC (quasi-static partial element equivalent circuit, Ruehli 1974)",
            "segments": result.circuit_segments,
            "seconds": result.circuit_seconds,
            "reduced_model_error": number_or_none(result.circuit_rom_error),
            "coverage": list(result.coverage),
        },
        "mesh": mesh_summary(result),
        "environment": result.environment.as_payload(),
        "solves": [
            {"frequency_hz": s.frequency_hz, "role": s.role, "seconds": s.seconds, "cached": s.cached,
             "asymmetry": float(s.asymmetry), "segment_wavelengths": s.segment_wavelengths}
            for s in result.solves
        ],
        "failures": [{"frequency_hz": f.frequency_hz, "role": f.role, "reason": f.reason}
                     for f in result.failures],
    }


def write_sweep(result: SweepResult, out: Path, z0: float = 50.0) -> list[Path]:
    """Write sweep.json, tap-<n>.s1p, taps.s<k>p, impedance.csv and impedance.png into ``out``.

    A plain writer, like the other commands' writers: the command line stages every command's
    files into one set with :func:`output_set` (so a study that writes these beside its other
    outputs gets one set, not a set inside a set).
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    written = [write_json(out / "sweep.json", sweep_dict(result, z0))]
    for i, n in enumerate(result.tap_turns):
        result.tap_network(i, z0).write_touchstone(filename=f"tap-{n}", dir=str(out), skrf_comment=False)
        written.append(out / f"tap-{n}.s1p")
    k = len(result.tap_turns)
    result.to_network(z0).write_touchstone(filename="taps", dir=str(out), skrf_comment=False)
    written += [out / f"taps.s{k}p", _write_impedance_csv(result, out / "impedance.csv")]
    from simloop.plots import plot_impedance

    written.append(plot_impedance(result, out / "impedance.png"))
    return written


def _write_impedance_csv(result: SweepResult, path: Path) -> Path:
    with path.open("w", newline="") as fh:
        w = csv.writer(fh)
        header = ["frequency_hz", "source"]
        for n in result.tap_turns:
            header += [f"tap{n}_resistance_ohm", f"tap{n}_reactance_ohm", f"tap{n}_error_estimate",
                       f"tap{n}_reliable"]
        w.writerow(header)
        for m, f in enumerate(result.frequencies_hz):
            row = [f"{f:.6f}", result.source[m]]
            for i in range(len(result.tap_turns)):
                z = result.z_ohm[m, i, i]
                row += [f"{z.real:.6e}", f"{z.imag:.6e}", f"{result.error_estimate[m, i]:.4f}",
                        str(bool(result.reliable[m, i])).lower()]
            w.writerow(row)
    return path
