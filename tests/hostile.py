"""Hostile bundles and profiles for the tests and for tools/fuzz_hostile.py: built, run, judged.

A *mutation* turns an intact bundle directory into a hostile one (symbolic
links in and out, FIFOs, wrong dtypes, lying headers and manifests, deep
nesting, huge numbers, duplicate keys, truncation); :func:`run_cli` runs a
command in a child process with a time limit (a FIFO that blocked a reader
would show as a hang, not hang the suite); :func:`judge` says what is wrong
with an outcome: an exit code outside 0/1/2, a traceback, a hang.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
ALLOWED_EXITS = (0, 1, 2)


def run_cli(args, *, cwd, timeout=120, env=None):
    """``(exit code or "hang", stdout, stderr)`` of ``python -m emucompile ARGS`` in a child process."""
    environment = dict(os.environ, PYTHONPATH=str(ROOT), OPENBLAS_NUM_THREADS="1", **(env or {}))
    environment.pop("EMUCOMPILE_DEBUG", None)
    try:
        done = subprocess.run([sys.executable, "-m", "emucompile", *map(str, args)], cwd=cwd, env=environment,
                              capture_output=True, text=True, timeout=timeout, stdin=subprocess.DEVNULL)
    except subprocess.TimeoutExpired as expired:
        return "hang", expired.stdout or "", expired.stderr or ""
    return done.returncode, done.stdout, done.stderr


def judge(outcome) -> str | None:
    """What is wrong with ``(code, stdout, stderr)``: None when the tool behaved."""
    code, _, stderr = outcome
    if code == "hang":
        return "hang"
    if code not in ALLOWED_EXITS:
        return f"exit {code}: {stderr.strip().splitlines()[-1:] }"
    if "Traceback" in stderr or "internal error" in stderr:
        return f"traceback: {stderr.strip().splitlines()[-1:]}"
    return None


def digest_tree(directory: Path) -> dict:
    """``{relative name: sha256 or link target or kind}`` of everything under ``directory`` (links not followed)."""
    result = {}
    for root, dirs, files in os.walk(directory):
        for name in dirs + files:
            path = Path(root, name)
            relative = str(path.relative_to(directory))
            if path.is_symlink():
                result[relative] = "link:" + os.readlink(path)
            elif path.is_file():
                result[relative] = hashlib.sha256(path.read_bytes()).hexdigest()
            elif not path.is_dir():
                result[relative] = "special"
    return result


# -- mutations of a bundle: each takes the bundle directory and a scratch directory outside it ---------


def _manifest(bundle: Path) -> dict:
    return json.loads(_regular(bundle / "manifest.json").read_text())


def _write_manifest(bundle: Path, manifest) -> None:
    _regular(bundle / "manifest.json").write_text(json.dumps(manifest, indent=1) if not isinstance(manifest, str) else manifest)


def _link_out(name):
    def mutate(bundle: Path, outside: Path):
        target = outside / Path(name).name
        if (bundle / name).is_dir():
            shutil.copytree(bundle / name, target, dirs_exist_ok=True)
            shutil.rmtree(bundle / name)
        else:
            shutil.copy(bundle / name, target)
            (bundle / name).unlink()
        os.symlink(target, bundle / name)
    return mutate


def _link_in(name):
    def mutate(bundle: Path, outside: Path):
        shutil.copy(bundle / name, bundle / ".copy")
        (bundle / name).unlink()
        os.symlink(".copy", bundle / name)
    return mutate


def _link_to_outside_fifo(name):
    def mutate(bundle: Path, outside: Path):
        fifo = outside / "pipe"
        if not fifo.exists():
            os.mkfifo(fifo)
        (bundle / name).unlink()
        os.symlink(fifo, bundle / name)
    return mutate


def _fifo(name):
    def mutate(bundle: Path, outside: Path):
        (bundle / name).unlink()
        os.mkfifo(bundle / name)
    return mutate


def _directory(name):
    def mutate(bundle: Path, outside: Path):
        (bundle / name).unlink()
        (bundle / name).mkdir()
    return mutate


def _dev_null(name):
    def mutate(bundle: Path, outside: Path):
        (bundle / name).unlink()
        os.symlink("/dev/zero", bundle / name)
    return mutate


def _manifest_edit(edit):
    def mutate(bundle: Path, outside: Path):
        manifest = _manifest(bundle)
        replaced = edit(manifest)
        _write_manifest(bundle, manifest if replaced is None else replaced)
    return mutate


def _file_entry(files, role):
    return next(e for e in files if e["role"] == role)


def _set(path, value):
    def edit(manifest):
        where = manifest
        for key in path[:-1]:
            where = _file_entry(where, key[5:]) if isinstance(key, str) and key.startswith("role:") else where[key]
        where[path[-1]] = value
    return edit


def _consistent_rate(rate):
    def edit(manifest):
        manifest["update_rate_hz"] = rate
        manifest["duration_s"] = manifest["n_samples"] / rate if rate > 0 else 1.0
    return edit


def _deep_profile(depth):
    def edit(manifest):
        text = json.dumps(manifest)
        return text.replace('"profile": {', '"profile": {"deep": ' + "[" * depth + "]" * depth + ", ", 1)
    return edit


def _deep_manifest(depth):
    def edit(manifest):
        return json.dumps(manifest)[:-1] + ', "deep": ' + "[" * depth + "]" * depth + "}"
    return edit


def _duplicate_key(manifest):
    text = json.dumps(manifest)
    return text.replace('"n_samples": ', '"n_samples": 1, "n_samples": ', 1)


def _huge_int(digits):
    def edit(manifest):
        return json.dumps(manifest).replace('"n_samples": ', '"n_samples": ' + "9" * digits + ', "x": ', 1)
    return edit


def _oversized(manifest):
    return json.dumps(manifest)[:-1] + ', "padding": "' + "x" * (65 * 1024**2) + '"}'


def _npy_header_lie(dtype_text):
    def mutate(bundle: Path, outside: Path):
        path = _regular(bundle / "tap_gains.npy")
        data = bytearray(path.read_bytes())
        header_end = data.index(b"\n") + 1
        header = data[10:header_end].decode("latin1").replace("'<c8'", dtype_text)
        header = header[:-1].ljust(header_end - 10 - 1) + "\n"
        data[10:header_end] = header.encode("latin1")[: header_end - 10]
        path.write_bytes(bytes(data))
    return mutate


def _regular(path: Path) -> Path:
    """The path, if a plain file: a mutation never writes through a link or into a FIFO (it would block)."""
    if path.is_symlink() or not path.is_file():
        raise FileNotFoundError(path)
    return path


def _truncate(name, keep):
    def mutate(bundle: Path, outside: Path):
        path = _regular(bundle / name)
        path.write_bytes(path.read_bytes()[:keep])
    return mutate


def _garbage(name):
    def mutate(bundle: Path, outside: Path):
        path = _regular(bundle / name)
        size = path.stat().st_size
        path.write_bytes(bytes((i * 37 + 11) % 256 for i in range(size)))
    return mutate


def _replace_bytes(name, data):
    def mutate(bundle: Path, outside: Path):
        _regular(bundle / name).write_bytes(data)
    return mutate


def _bom(manifest):
    return "\ufeff" + json.dumps(manifest)


MUTATIONS = {
    # links and special files
    "tap_gains link out": _link_out("tap_gains.npy"),
    "manifest link out": _link_out("manifest.json"),
    "fir_map link out": _link_out("fir_map.npy"),
    "sigmf folder link out": _link_out("sigmf"),
    "tap_gains link in": _link_in("tap_gains.npy"),
    "manifest link in": _link_in("manifest.json"),
    "tap_gains link to outside FIFO": _link_to_outside_fifo("tap_gains.npy"),
    "manifest link to outside FIFO": _link_to_outside_fifo("manifest.json"),
    "tap_gains FIFO": _fifo("tap_gains.npy"),
    "manifest FIFO": _fifo("manifest.json"),
    "fir_map FIFO": _fifo("fir_map.npy"),
    "sigmf meta FIFO": _fifo("sigmf/tap0_rx0_tx0.sigmf-meta"),
    "tap_gains directory": _directory("tap_gains.npy"),
    "tap_gains link to /dev/zero": _dev_null("tap_gains.npy"),
    "cf32 link to /dev/zero": _dev_null("tap_gains.cf32"),
    # lying manifests
    "rate 1e300 consistent": _manifest_edit(_consistent_rate(1e300)),
    "rate 5e-324 consistent": _manifest_edit(_consistent_rate(5e-324)),
    "rate 1e14 consistent": _manifest_edit(_consistent_rate(1e14)),
    "rate 1e-5 consistent": _manifest_edit(_consistent_rate(1e-5)),
    "n_samples 1e18": _manifest_edit(_set(["n_samples"], 10**18)),
    "n_taps 0": _manifest_edit(_set(["n_taps"], 0)),
    "shape lie": _manifest_edit(_set(["files", "role:tap_gains", "shape"], [10, 1, 1, 1])),
    "dtype lie": _manifest_edit(_set(["files", "role:tap_gains", "dtype"], "float64")),
    "data_offset lie npy": _manifest_edit(_set(["files", "role:tap_gains", "data_offset"], 64)),
    "data_offset lie cf32": _manifest_edit(_set(["files", "role:tap_gains_cf32", "data_offset"], 800)),
    "data_offset huge cf32": _manifest_edit(_set(["files", "role:tap_gains_cf32", "data_offset"], 2**62)),
    "data_offset negative ci16": _manifest_edit(_set(["files", "role:tap_gains_ci16", "data_offset"], -8)),
    "size lie": _manifest_edit(_set(["files", "role:tap_gains", "size_bytes"], 10**15)),
    "name absolute": _manifest_edit(_set(["files", "role:tap_gains", "name"], "/etc/passwd")),
    "name dotdot": _manifest_edit(_set(["files", "role:tap_gains_cf32", "name"], "../outside.cf32")),
    "name backslash": _manifest_edit(_set(["files", "role:tap_gains_cf32", "name"], "..\\x.cf32")),
    "fir sample rate 1e300": _manifest_edit(_set(["fir", "sample_rate_hz"], 1e300)),
    "fir n_fir 0": _manifest_edit(_set(["fir", "n_fir"], 0)),
    "taps empty": _manifest_edit(_set(["taps"], [])),
    "profile not a dict": _manifest_edit(_set(["profile"], [1, 2])),
    "profile delay -1e308": _manifest_edit(lambda m: m["profile"]["taps"][0].update(delay_ns=-1e308)),
    "profile tolerance 1e308": _manifest_edit(
        lambda m: m["profile"].setdefault("expect", {}).update(max_doppler_hz={"value": 5, "tolerance_pct": 1e308})),
    "seed huge": _manifest_edit(_set(["seed"], 10**300)),
    "seed negative": _manifest_edit(_set(["seed"], -1)),
    "generator version": _manifest_edit(_set(["generator_version"], "999")),
    "format version 2": _manifest_edit(_set(["format_version"], 2)),
    "format version huge": _manifest_edit(_set(["format_version"], 10**300)),
    "manifest deep 1e5": _manifest_edit(_deep_manifest(100_000)),
    "profile deep 5000": _manifest_edit(_deep_profile(5000)),
    "profile deep 60": _manifest_edit(_deep_profile(60)),
    "manifest duplicate key": _manifest_edit(_duplicate_key),
    "manifest 5000-digit int": _manifest_edit(_huge_int(5000)),
    "manifest 400-digit int": _manifest_edit(_huge_int(400)),
    "manifest over 64 MiB": _manifest_edit(_oversized),
    "manifest BOM": _manifest_edit(_bom),
    "manifest not UTF-8": _replace_bytes("manifest.json", b"\xff\xfe{\x00}"),
    "manifest NaN": _manifest_edit(lambda m: json.dumps(m).replace('"update_rate_hz": ', '"update_rate_hz": NaN, "x": ', 1)),
    "manifest empty": _replace_bytes("manifest.json", b""),
    "manifest a list": _replace_bytes("manifest.json", b"[]"),
    "manifest truncated": _truncate("manifest.json", 200),
    # lying data
    "npy header says float64": _npy_header_lie("'<f8'"),
    "npy header says object": _npy_header_lie("'|O'"),
    "tap_gains truncated": _truncate("tap_gains.npy", 300),
    "tap_gains garbage": _garbage("tap_gains.npy"),
    "fir_map garbage": _garbage("fir_map.npy"),
    "cf32 truncated": _truncate("tap_gains.cf32", 100),
    "sigmf meta duplicate key": _replace_bytes("sigmf/tap0_rx0_tx0.sigmf-meta",
                                               b'{"global": {"core:datatype": "cf32_le", "core:datatype": "ci16_le"}}'),
    "sigmf meta deep": _replace_bytes("sigmf/tap0_rx0_tx0.sigmf-meta", b"[" * 100_000 + b"]" * 100_000),
    "sigmf meta 400-digit rate": _replace_bytes(
        "sigmf/tap0_rx0_tx0.sigmf-meta", b'{"global": {"core:datatype": "cf32_le", "core:sample_rate": ' + b"9" * 400 + b"}}"),
}


def compile_intact(where: Path, *, duration="0.3", seed="5") -> Path:
    """A small bundle ``where/b`` with every format the mutations touch (cf32, ci16, sigmf, FIR map)."""
    code, _, stderr = run_cli(
        ["compile", ROOT / "profiles_demo" / "warehouse-robot.yaml", "-o", where / "b", "--duration", duration,
         "--seed", seed, "--sample-rate", "1e6", "--format", "cf32,ci16,sigmf", "--quiet"], cwd=where)
    assert code == 0, stderr
    return where / "b"


def apply_mutations(intact: Path, where: Path, names) -> tuple[Path, Path]:
    """A copy of ``intact`` under ``where`` changed by each mutation in turn; ``(bundle, outside)``.

    A mutation whose target an earlier one removed or replaced is skipped.
    """
    bundle, outside = where / "bundle", where / "outside"
    shutil.copytree(intact, bundle, symlinks=True)
    outside.mkdir(exist_ok=True)
    for name in names:
        try:
            MUTATIONS[name](bundle, outside)
        except (FileNotFoundError, StopIteration, KeyError, TypeError, ValueError, OSError):
            pass
    return bundle, outside


def make_hostile(intact: Path, where: Path, name: str) -> tuple[Path, Path]:
    """A copy of the bundle ``intact`` under ``where``, mutated by ``MUTATIONS[name]``; ``(bundle, outside)``."""
    bundle, outside = where / "bundle", where / "outside"
    shutil.copytree(intact, bundle, symlinks=True)
    outside.mkdir(exist_ok=True)
    MUTATIONS[name](bundle, outside)  # here a failing mutation is a broken test
    return bundle, outside


def commands(bundle: Path, scratch: Path, recording: Path) -> dict:
    """The three readers of a bundle, as argument lists."""
    return {
        "verify": ["verify", bundle, "--no-plots", "--report", scratch / "report.html"],
        "reproduce": ["reproduce", bundle],
        "apply": ["apply", bundle, recording, "--sample-rate", "1e6", "-o", scratch / "out.npy", "--force", "--quiet"],
    }
