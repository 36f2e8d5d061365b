"""What a bundle holds, known before a sample is generated, and its manifest's rules (docs/bundle-format.md).

:class:`BundleLayout` states the shapes and formats; its
``estimated_size_bytes`` is known before any number is generated (the
writer refuses above a size limit or the free space). :func:`validate_manifest`
checks a manifest against the JSON Schema shipped in the package and the
rules a schema cannot state (shapes agree, a format is listed iff its files
are, rates in range). Which writer makes which format comes from the
registry, :mod:`emucompile.bundle.formats`.
"""

from __future__ import annotations

import importlib.metadata
import json
import math
import os
import platform
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np

from emucompile._lazy import LazyModule
from emucompile.bundle import formats as registry
from emucompile.bundle import quantised, writers
from emucompile.errors import Problem
from emucompile.models.rates import DEFAULT_MAX_SIZE_BYTES, MAX_UPDATE_TO_DOPPLER, RATE_RANGE_HZ  # noqa: F401  (re-exported)

jsonschema = LazyModule("jsonschema")
referencing = LazyModule("referencing")

FORMAT_NAME = "emucompile-bundle"
FORMAT_VERSION = 1
MANIFEST_NAME = "manifest.json"
EXTRA_FORMATS = registry.EXTRA_FORMATS
parse_formats = registry.parse_formats
VERIFICATION_DIRECTORY = "verification"  # verify's reports: not hashed, replaced with the bundle
MANIFEST_ALLOWANCE_BYTES = 64 * 1024  # the manifest embeds the profile; generous upper bound
MANIFEST_ENTRY_BYTES = 2048  # per file entry (the ci16 entry, the largest, is about 1.5 KiB)
MANIFEST_MAX_BYTES = 64 * 1024**2  # readers refuse a larger manifest.json (the writer too)
SCHEMA_RESOURCE = "bundle-manifest-v1.schema.json"
# The manifest schema takes the spectrum kinds from the profile schema (its "$ref" across files).
REFERENCED_SCHEMA_RESOURCES = ("profile-v1.schema.json",)
WRITER_FIELDS = (
    "format",
    "format_version",
    "tool_version",
    "created_utc",
    "update_rate_hz",
    "n_samples",
    "n_taps",
    "n_rx",
    "n_tx",
    "platform",
    "formats",
    "files",
)
_MANIFEST_ORDER = (
    "format",
    "format_version",
    "tool_version",
    "generator_version",
    "created_utc",
    "profile_sha256",
    "resolved_profile_sha256",
    "seed",
    "method",
    "generator",
    "update_rate_hz",
    "n_samples",
    "duration_s",
    "n_taps",
    "n_rx",
    "n_tx",
    "periodic",
    "taps",
    "mimo",
    "conditions",
    "fir",
    "target",
    "platform",
    "formats",
    "files",
    "profile",
)


@dataclass(frozen=True)
class BundleLayout:
    """What a bundle will hold, known before any sample is generated.

    Parameters
    ----------
    n_samples, n_taps : int
        Samples per tap and link; number of taps.
    update_rate_hz : float
        Rate of the tap-gain samples (SigMF sample rate, csv time axis).
    n_rx, n_tx : int
        Antennas; 1 and 1 for SISO.
    formats : sequence of str or str
        Extra formats (see :data:`EXTRA_FORMATS`); ``"cf32,sigmf"`` works too.
    fir_map : array (n_taps, n_fir), optional
        The map to FIR coefficients; written as ``fir_map.npy``; required by ``fir``.
    tap_power_linear, tap_k_linear : sequence of float, optional
        Mean power and Rician K per tap (K = 0 Rayleigh, ``inf`` static);
        required by ``ci16``, whose scale is chosen from them before the data
        exist (:func:`emucompile.bundle.formats.ci16_scaling`).
    clip_probability : float
        Design clipping probability of ``ci16`` (per sample, envelope law).
    csv_max_rows : int or None
        ``csv`` is refused above this many rows (default 1,000,000); None lifts the limit.
    extra_arrays : tuple of (name, role, dtype, shape, make, axes)
        Arrays along the sample axis streamed beside the gains, e.g.
        ``shadowing_db.npy``: ``make(start, stop)`` returns rows [start, stop)
        (shape ``(stop - start, *shape[1:])``); it is called on the caller's
        thread for each chunk, so memory stays flat in the record's length.
    fir_maps : callable(start, stop) -> array (m, n_taps, n_fir), optional
        A time-varying FIR map (moving delay): ``fir.npy`` is then
        sum_k tap_gains[n, ..., k] fir_maps(n)[k]; ``fir_map`` stays the map
        at zero offset on the same grid. It may return the map sparse instead,
        as ``(index, values)`` of :meth:`emucompile.models.grid.MovingFirMap.sparse`.
    fir_codes : dict, optional
        The emulator's integer FIR coefficients (a target with
        ``coefficient_bits``): ``{"columns", "bits", "step", "headroom_db",
        "sample_rate_hz", "bulk_delay_samples"}`` for
        :class:`emucompile.bundle.formats.FirCodesWriter`; needs ``fir_map``.
    """

    n_samples: int
    n_taps: int
    update_rate_hz: float
    n_rx: int = 1
    n_tx: int = 1
    formats: tuple = ()
    fir_map: np.ndarray | None = field(default=None, compare=False, repr=False)
    tap_power_linear: tuple | None = None
    tap_k_linear: tuple | None = None
    clip_probability: float = quantised.DEFAULT_CLIP_PROBABILITY
    csv_max_rows: int | None = registry.DEFAULT_CSV_MAX_ROWS
    extra_arrays: tuple = field(default=(), compare=False, repr=False)
    fir_maps: object = field(default=None, compare=False, repr=False)
    fir_codes: dict | None = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        set_ = object.__setattr__
        set_(self, "formats", parse_formats(self.formats))
        for name in ("n_samples", "n_taps", "n_rx", "n_tx"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
                raise ValueError(f"{name} must be an integer >= 1, got {value!r}")
            set_(self, name, int(value))
        if not (self.update_rate_hz > 0 and math.isfinite(self.update_rate_hz)):
            raise ValueError(f"update_rate_hz must be finite and > 0, got {self.update_rate_hz!r}")
        set_(self, "update_rate_hz", float(self.update_rate_hz))
        if self.fir_map is not None:
            fir_map = np.asarray(self.fir_map)
            if fir_map.ndim != 2 or fir_map.shape[0] != self.n_taps or fir_map.shape[1] < 1:
                raise ValueError(f"fir_map must have shape (n_taps={self.n_taps}, n_fir), got {fir_map.shape}")
            if fir_map.dtype not in (np.float32, np.float64, np.complex64, np.complex128):
                raise ValueError(f"fir_map must be float or complex, got {fir_map.dtype}")
            if not np.isfinite(fir_map).all():
                raise ValueError("fir_map holds NaN or infinity")
            set_(self, "fir_map", fir_map)
        for name in ("tap_power_linear", "tap_k_linear"):
            value = getattr(self, name)
            if value is not None:
                value = tuple(float(v) for v in value)
                if len(value) != self.n_taps:
                    raise ValueError(f"{name} needs {self.n_taps} values, got {len(value)}")
                set_(self, name, value)
        if self.fir_codes is not None and self.fir_map is None:
            raise ValueError("the FIR coefficient codes need the FIR map")
        for name in self.formats:
            check = registry.FORMATS[name].check
            if check is not None:
                check(self)

    @classmethod
    def from_profile(cls, profile, **options) -> "BundleLayout":
        """A layout whose tap powers and K-factors come from a :class:`~emucompile.profile.model.Profile`.

        ``options`` are the other parameters (``n_samples``, ``update_rate_hz``, ...).
        """
        kinds = {"static": lambda t: math.inf, "rayleigh": lambda t: 0.0, "rician": lambda t: t.k_linear}
        return cls(
            n_taps=profile.n_taps,
            tap_power_linear=tuple(t.power_linear for t in profile.taps),
            tap_k_linear=tuple(kinds[t.fading](t) for t in profile.taps),
            **options,
        )

    @property
    def gains_shape(self) -> tuple[int, int, int, int]:
        return (self.n_samples, self.n_rx, self.n_tx, self.n_taps)

    @property
    def ci16_scaling(self) -> quantised.Ci16Scaling | None:
        """The int16 scale (None unless ``ci16`` is requested)."""
        if "ci16" not in self.formats:
            return None
        return quantised.ci16_scaling(self.tap_power_linear, self.tap_k_linear, clip_probability=self.clip_probability)

    def planned_files(self) -> list[tuple[str, int]]:
        """``(name, size_bytes)`` of every file to be written; csv and metadata sizes are upper bounds."""
        streams = self._stream_writers()
        sizes = [(w.name, w.size_bytes) for w in streams]
        if self.fir_map is not None:
            fir_map = np.asarray(self.fir_map)
            sizes.insert(1, ("fir_map.npy", len(writers.npy_header(fir_map.dtype, fir_map.shape)) + fir_map.nbytes))
        for name, _role, dtype, shape, _make, _axes in self.extra_arrays:
            sizes.append((name, len(writers.npy_header(dtype, shape)) + int(np.prod(shape)) * np.dtype(dtype).itemsize))
        n_entries = len(sizes) + sum(getattr(w, "n_entries", 1) - 1 for w in streams)
        sizes.append((MANIFEST_NAME, MANIFEST_ALLOWANCE_BYTES + MANIFEST_ENTRY_BYTES * n_entries))
        return sizes

    @property
    def estimated_size_bytes(self) -> int:
        """Bytes the bundle will take (an upper bound where a size depends on the numbers)."""
        return sum(size for _, size in self.planned_files())

    def _stream_writers(self) -> list:
        """Fresh writers of the chunked files, in manifest order (tap_gains.npy first)."""
        streams = [
            registry.FORMATS[name].writer(self)
            for name in registry.FORMATS
            if registry.FORMATS[name].always or name in self.formats
        ]
        if self.fir_codes is not None:
            streams.append(
                quantised.FirCodesWriter(
                    self.fir_map, n_samples=self.n_samples, n_rx=self.n_rx, n_tx=self.n_tx, **self.fir_codes
                )
            )
        return streams


def validate_manifest(manifest, *, source: str = MANIFEST_NAME) -> list[Problem]:
    """Schema errors (each with its JSON pointer) and cross-field inconsistencies of a manifest."""
    validator = manifest_validator()
    problems = []
    for error in sorted(validator.iter_errors(manifest), key=lambda e: list(map(str, e.absolute_path))):
        pointer = "".join(f"/{p}" for p in error.absolute_path)
        problems.append(Problem(source, pointer, _schema_message(error)))
    if problems or not isinstance(manifest, dict):
        return problems
    return _consistency_problems(manifest, source)


def manifest_schema() -> dict:
    """The manifest's JSON Schema (draft 2020-12) shipped in the package."""
    global _SCHEMA
    if _SCHEMA is None:
        _SCHEMA = json.loads(resources.files("emucompile").joinpath("schemas", SCHEMA_RESOURCE).read_text("utf-8"))
    return _SCHEMA


def schema_registry():
    """A ``referencing`` registry of the packaged schemas the manifest schema refers to, by their ``$id``.

    Resolving a reference never goes to the network (the ``$id`` hosts are ``.invalid``):
    a URI not in the registry is an error, not a download.
    """
    global _REGISTRY
    if _REGISTRY is None:
        folder = resources.files("emucompile").joinpath("schemas")
        schemas = [json.loads(folder.joinpath(name).read_text("utf-8")) for name in REFERENCED_SCHEMA_RESOURCES]
        _REGISTRY = referencing.Registry().with_resources(
            (schema["$id"], referencing.Resource.from_contents(schema)) for schema in schemas
        ).crawl()
    return _REGISTRY


def manifest_validator():
    """The manifest schema's draft 2020-12 validator, its references to other schemas resolved offline."""
    global _VALIDATOR
    if _VALIDATOR is None:
        _VALIDATOR = jsonschema.Draft202012Validator(manifest_schema(), registry=schema_registry())
    return _VALIDATOR


def platform_info() -> dict:
    """Versions and machine the same-bytes promise depends on."""
    try:
        scipy_version = importlib.metadata.version("scipy")
    except importlib.metadata.PackageNotFoundError:
        scipy_version = "not installed"
    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy_version,
        "machine": platform.machine(),
        "system": platform.system(),
    }


_SCHEMA = _REGISTRY = _VALIDATOR = None


def _schema_message(error) -> str:
    if error.validator == "required":
        return error.message.replace("is a required property", "is missing")
    if error.validator == "additionalProperties":
        return error.message
    if error.validator == "anyOf" and error.context:  # say what each choice wanted (a spectrum kind, or null)
        message = " and ".join(dict.fromkeys(e.message for e in error.context))
        return message if len(message) < 160 else message[:157] + "..."
    return error.message if len(error.message) < 160 else error.message[:157] + "..."


def _consistency_problems(manifest: dict, source: str) -> list[Problem]:
    problems = []

    def problem(pointer, message):
        problems.append(Problem(source, pointer, message))

    n, rx, tx, taps = (manifest[k] for k in ("n_samples", "n_rx", "n_tx", "n_taps"))
    if len(manifest["taps"]) != taps:
        problem("/taps", f"lists {len(manifest['taps'])} taps, n_taps is {taps}")
    rate = manifest["update_rate_hz"]
    low, high = RATE_RANGE_HZ
    rates = [("/update_rate_hz", rate)] + (
        [("/fir/sample_rate_hz", manifest["fir"]["sample_rate_hz"])] if manifest["fir"] is not None else []
    )
    for pointer, value in rates:
        if not low <= value <= high:
            problem(pointer, f"{value:g} Hz lies outside {low:g} to {high:g} Hz (no bundle is made so)")
    edges = [t.get("max_doppler_hz") for t in manifest["taps"] if isinstance(t, dict) and t.get("fading") != "static"]
    edges = [e for e in edges if isinstance(e, (int, float)) and not isinstance(e, bool) and e > 0]
    if edges and rate / min(edges) > MAX_UPDATE_TO_DOPPLER:
        problem(
            "/update_rate_hz",
            f"{rate:g} Hz is {rate / min(edges):.3g} x the smallest maximum Doppler "
            f"{min(edges):g} Hz, above the limit of {MAX_UPDATE_TO_DOPPLER:g} x (no bundle is made so)",
        )
    if problems:
        return problems
    if abs(manifest["duration_s"] - n / rate) > 1.0 / rate * (1 + 1e-9):
        problem("/duration_s", f"{manifest['duration_s']} s disagrees with n_samples / update_rate_hz = {n / rate} s")
    files = manifest["files"]
    names = [e["name"] for e in files]
    for name in sorted({x for x in names if names.count(x) > 1}):
        problem("/files", f"lists {name} twice")
    if MANIFEST_NAME in names:
        problem("/files", "must not list manifest.json itself")
    by_role = {}
    for index, entry in enumerate(files):
        by_role.setdefault(entry["role"], []).append((index, entry))
    expect = {"tap_gains": ("tap_gains.npy", "complex64", [n, rx, tx, taps])}
    if manifest["fir"] is not None:
        expect["fir_map"] = ("fir_map.npy", None, [taps, manifest["fir"]["n_fir"]])
        if "fir" in manifest["formats"]:
            expect["fir"] = ("fir.npy", "complex64", [n, rx, tx, manifest["fir"]["n_fir"]])
    elif "fir" in manifest["formats"] or "fir_map" in by_role:
        problem("/fir", "is null, but the bundle lists a FIR map or the fir format")
    for role, (name, dtype, shape) in expect.items():
        found = by_role.get(role, [])
        if len(found) != 1 or found[0][1]["name"] != name:
            problem("/files", f"must list {name} (role {role}) once")
            continue
        index, entry = found[0]
        if entry["shape"] != shape or (dtype and entry["dtype"] != dtype):
            problem(
                f"/files/{index}",
                f"{name}: {entry['dtype']} {entry['shape']}, expected {dtype or 'a float/complex'} {shape}",
            )
    for index, entry in enumerate(files):
        message = _layout_problem(entry)
        if message:
            problem(f"/files/{index}", message)
    for name in registry.EXTRA_FORMATS:
        role = registry.FORMATS[name].role
        if role not in expect and (name in manifest["formats"]) != (role in by_role):
            problem("/formats", f"format {name} and the files of role {role} disagree")
    if "ci16" in manifest["formats"] and any("quantisation" not in e for _, e in by_role.get("tap_gains_ci16", [])):
        problem("/files", "the ci16 file lacks its quantisation record")
    problems += _fir_codes_problems(manifest, by_role.get(quantised.FIR_CODES_ROLE, []), source)
    return problems


def _fir_codes_problems(manifest: dict, found: list, source: str) -> list[Problem]:
    """The integer FIR coefficients: at most one file, only with a FIR map and a coefficient bit width."""
    if not found:
        return []
    bits = (((manifest.get("target") or {}).get("constraints")) or {}).get("coefficient_bits")
    if len(found) > 1 or manifest["fir"] is None or bits is None:
        return [
            Problem(
                source, "/files", "integer FIR coefficients need one file, a FIR map and a target's coefficient_bits"
            )
        ]
    index, entry = found[0]
    codes = entry.get("coefficient_codes") or {}
    n, rx, tx = (manifest[k] for k in ("n_samples", "n_rx", "n_tx"))
    shape = [n, rx, tx, len(codes.get("columns") or []), 2]
    dtype = "int16" if bits <= 16 else "int32"
    if entry["shape"] != shape or entry["dtype"] != dtype or codes.get("bits") != bits:
        return [
            Problem(
                source,
                f"/files/{index}",
                f"{entry['name']}: {entry['dtype']} {entry['shape']} on "
                f"{codes.get('bits')} bits, expected {dtype} {shape} on {bits} bits",
            )
        ]
    if any(not 0 <= c < manifest["fir"]["n_fir"] for c in codes["columns"]):
        return [Problem(source, f"/files/{index}", f"{entry['name']}: a path column lies outside the FIR")]
    return []


def _layout_problem(entry: dict) -> str | None:
    """A file entry whose data_offset, shape and dtype do not add up to its size_bytes (None when they do)."""
    offset, size, shape = entry.get("data_offset"), entry.get("size_bytes"), entry.get("shape")
    if not (isinstance(offset, int) and isinstance(size, int)) or isinstance(offset, bool):
        return None  # the schema speaks about types
    if not 0 <= offset <= size:
        return f"{entry['name']}: data_offset {offset} lies outside its {size} bytes"
    try:
        dtype = np.dtype(entry.get("dtype"))
    except TypeError:
        return None  # text, json: no fixed element size
    if (
        dtype.kind not in "iufc"
        or not isinstance(shape, list)
        or not all(isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in shape)
    ):
        return None
    data = math.prod(shape) * dtype.itemsize
    if offset + data != size:
        return f"{entry['name']}: data_offset {offset} + {data} bytes of {dtype.name} {shape} != size_bytes {size}"
    return None


def _plain_json(value):
    """numpy scalars/arrays -> JSON-native values (and a deep copy)."""
    return json.loads(json.dumps(value, default=_json_default, allow_nan=False))


def _json_default(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (Path, os.PathLike)):
        return os.fspath(value)
    raise TypeError(f"a manifest value of type {type(value).__name__} is not JSON")


def _size_text(n_bytes: int) -> str:
    for unit, size in (("TiB", 1024**4), ("GiB", 1024**3), ("MiB", 1024**2), ("KiB", 1024)):
        if n_bytes >= size:
            return f"{n_bytes / size:.1f} {unit}"
    return f"{n_bytes} bytes"


__all__ = [
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "MANIFEST_NAME",
    "DEFAULT_MAX_SIZE_BYTES",
    "VERIFICATION_DIRECTORY",
    "MANIFEST_MAX_BYTES",
    "RATE_RANGE_HZ",
    "MAX_UPDATE_TO_DOPPLER",
    "WRITER_FIELDS",
    "BundleLayout",
    "validate_manifest",
    "manifest_schema",
    "manifest_validator",
    "schema_registry",
    "platform_info",
]
