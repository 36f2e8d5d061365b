"""The output formats of a bundle, in one registry: name -> role, files, writer, reader, dequantiser.

Every place that knows a format asks :data:`FORMATS`: the bundle layout (which
writer streams which file, what a format needs), the manifest's consistency
check (a format listed iff its files are), :meth:`emucompile.bundle.reader.Bundle.read_format`,
verify ``--delivered``, compile's early size bound and the command line's
``--format`` help; a test compares the names and roles with the manifest
schema's enums. Adding a format is one :class:`OutputFormat` here (with its
writer), its names in ``emucompile/schemas/bundle-manifest-v1.schema.json`` and a test.

Formats (the layout of each is also written into its manifest entry;
``docs/bundle-format.md`` has the table):

``npy``
    ``tap_gains.npy``: NumPy format 1.0 header, then raw little-endian
    complex64 in C order over (sample, rx, tx, tap); always written.
``cf32``
    ``tap_gains.cf32``: the same bytes as the npy data, without a header.
``ci16``
    ``tap_gains.ci16``: interleaved little-endian int16 I, Q in the same order;
    gain = (I + jQ) / ``scale_factor`` (:mod:`emucompile.bundle.quantised`).
``csv``
    ``tap_gains.csv``: a header row, then one row per sample: time in
    seconds, then re and im of each (rx, tx, tap), ``%.9e``.
``sigmf``
    ``sigmf/tapK_rxR_txT.sigmf-data`` and ``.sigmf-meta``: one SigMF recording
    per tap and link, ``cf32_le`` at the update rate.
``fir``
    ``fir.npy``: the materialised FIR, tap_gains @ fir_map, complex64 of shape
    (n_samples, n_rx, n_tx, n_fir).

The FIR coefficient codes (``fir_coefficients.ci16``/``.ci32``) are not a
format one asks for: a target's ``coefficient_bits`` writes them
(:class:`emucompile.bundle.quantised.FirCodesWriter`).

This module imports no numpy itself (the writers and readers load on first
use), so the command line can print the names at start-up. The names of the
writer and reader modules stay reachable here (``formats.HashedFile``, ...).
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from typing import Callable

from emucompile._lazy import LazyModule
from emucompile.errors import InputError

writers = LazyModule("emucompile.bundle.writers")
quantised = LazyModule("emucompile.bundle.quantised")
readers = LazyModule("emucompile.bundle.readers")
members = LazyModule("emucompile.bundle.members")

DEFAULT_CSV_MAX_ROWS = 1_000_000
CSV_ROW_LIMIT_OPTION = "--csv-any-size"
"""The command-line option that lifts the csv row limit (named in the refusal's hint)."""


@dataclass(frozen=True)
class OutputFormat:
    """One output format of a bundle.

    Attributes
    ----------
    name : str
        What ``--format`` and the manifest's ``formats`` call it.
    role : str
        Manifest role of its data file(s).
    files : str
        Its file name(s) inside the bundle (a pattern for several files).
    summary : str
        One line for the command line's help and the docs.
    writer : callable(layout) -> writer
        A fresh streaming writer for a :class:`~emucompile.bundle.layout.BundleLayout`.
    reader : callable(root, entries, shape) -> array
        The data as stored (codes for an integer format), from the bundle
        directory ``root``, the manifest entries of ``role`` and the gains'
        shape (n_samples, n_rx, n_tx, n_taps); files opened by
        :func:`emucompile.bundle.members.open_member`.
    dequantise : callable(stored, entry) -> complex array, optional
        Stored codes back to gains (None: stored as complex numbers).
    check : callable(layout), optional
        Raise when a layout cannot hold the format (what it needs, its limits).
    copy_factor : float
        Bytes per byte of complex64 gains, at least (compile's size bound before the layout exists).
    always : bool
        Written into every bundle (not an "extra" format).
    """

    name: str
    role: str
    files: str
    summary: str
    writer: Callable
    reader: Callable
    dequantise: Callable | None = None
    check: Callable | None = None
    copy_factor: float = 0.0
    always: bool = False

    def read(self, root, entries, shape):
        """The tap gains as this format stores them, dequantised: shape (n_samples, n_rx, n_tx, n_taps)."""
        stored = self.reader(root, entries, shape)
        return stored if self.dequantise is None else self.dequantise(stored, entries[0])


# -- the formats' own pieces -------------------------------------------------------------------


def _csv_check(layout) -> None:
    if layout.csv_max_rows is not None and layout.n_samples > layout.csv_max_rows:
        raise InputError(
            f"csv: {layout.n_samples} rows is above the limit of {layout.csv_max_rows} rows",
            hint=f"shorten the record, lower the update rate, choose cf32/sigmf, or lift the limit with "
            f"{CSV_ROW_LIMIT_OPTION}",
        )


def _ci16_check(layout) -> None:
    if layout.tap_power_linear is None or layout.tap_k_linear is None:
        raise ValueError("the ci16 format needs tap_power_linear and tap_k_linear to choose its scale")


def _fir_check(layout) -> None:
    if layout.fir_map is None:
        raise InputError("the fir format needs the FIR map", hint="give a sample rate (--sample-rate)")


def _read_csv(root, entries, shape):
    with members.open_member(root, entries[0]["name"]) as handle:
        text = io.TextIOWrapper(io.BufferedReader(handle), encoding="ascii", newline="")
        _, values, _ = readers.read_csv(text)
    return values.reshape(shape)


def _read_sigmf(root, entries, shape):
    """Every per-tap, per-link recording into one array; each metadata's datatype checked (cf32_le)."""
    import numpy as np  # external; this module stays light at start-up

    out = np.empty(shape, dtype=np.complex64)
    for entry in entries:
        meta_name = entry["name"][: -len(".sigmf-data")] + ".sigmf-meta"
        metadata = members.member_json(root, meta_name, max_bytes=readers.SIGMF_META_MAX_BYTES)
        datatype = (metadata.get("global") or {}).get("core:datatype") if isinstance(metadata, dict) else None
        if datatype != "cf32_le":
            raise members.BundleError(
                [
                    members.Problem(
                        f"{root}/{meta_name}",
                        "/global/core:datatype",
                        f"{members.short_repr(datatype)}; a bundle's SigMF data are cf32_le",
                    )
                ]
            )
        out[:, entry["rx"], entry["tx"], entry["tap"]] = members.member_raw(root, entry, "<c8", shape[:1])
    return out


def _gains_writer(name, role, header):
    def make(layout):
        return writers.ArrayWriter(name, role, "complex64", layout.gains_shape, writers.GAIN_AXES, header=header)

    return make


FORMATS: dict[str, OutputFormat] = {
    f.name: f
    for f in (
        OutputFormat(
            "npy",
            "tap_gains",
            "tap_gains.npy",
            "complex64 tap gains with an npy header (always written)",
            writer=_gains_writer("tap_gains.npy", "tap_gains", True),
            reader=lambda root, entries, shape: members.member_npy(root, entries[0]),
            always=True,
        ),
        OutputFormat(
            "cf32",
            "tap_gains_cf32",
            "tap_gains.cf32",
            "the same complex64 gains without a header",
            writer=_gains_writer("tap_gains.cf32", "tap_gains_cf32", False),
            reader=lambda root, entries, shape: members.member_raw(root, entries[0], "<c8", shape),
            copy_factor=1.0,
        ),
        OutputFormat(
            "ci16",
            "tap_gains_ci16",
            "tap_gains.ci16",
            "int16 I/Q codes, scale chosen before the data",
            writer=lambda layout: quantised.Ci16Writer(
                layout.ci16_scaling, *layout.gains_shape, layout.tap_power_linear
            ),
            reader=lambda root, entries, shape: members.member_raw(root, entries[0], "<i2", (*shape, 2)),
            dequantise=lambda codes, entry: quantised.dequantise_ci16(codes, entry["quantisation"]["scale_factor"]),
            check=_ci16_check,
            copy_factor=0.5,
        ),
        OutputFormat(
            "csv",
            "tap_gains_csv",
            "tap_gains.csv",
            f"text, one row per sample (at most {DEFAULT_CSV_MAX_ROWS:,} rows)",
            writer=lambda layout: writers.CsvWriter(*layout.gains_shape, layout.update_rate_hz),
            reader=_read_csv,
            check=_csv_check,
            copy_factor=1.0,
        ),
        OutputFormat(
            "sigmf",
            "sigmf_data",
            "sigmf/tapK_rxR_txT.sigmf-data and .sigmf-meta",
            "one SigMF recording per tap and link",
            writer=lambda layout: writers.SigmfWriter(*layout.gains_shape, layout.update_rate_hz),
            reader=_read_sigmf,
            copy_factor=1.0,
        ),
        OutputFormat(
            "fir",
            "fir",
            "fir.npy",
            "the FIR coefficients over time, tap_gains @ fir_map (needs a sample rate)",
            writer=lambda layout: writers.FirWriter(
                layout.fir_map, layout.n_samples, layout.n_rx, layout.n_tx, maps=layout.fir_maps
            ),
            reader=lambda root, entries, shape: members.member_npy(root, entries[0]),
            check=_fir_check,
        ),
    )
}
"""Every output format, in the canonical order (the order of ``formats`` in a manifest)."""

EXTRA_FORMATS = tuple(name for name, f in FORMATS.items() if not f.always)
"""The formats one may ask for (``--format``); npy is always written."""


def get(name: str) -> OutputFormat:
    """The format called ``name``; ``ValueError`` naming the choices otherwise."""
    try:
        return FORMATS[name]
    except KeyError:
        raise ValueError(f"unknown format {name!r}; choose from {', '.join(FORMATS)}") from None


def parse_formats(formats) -> tuple[str, ...]:
    """``"cf32,ci16"`` or a sequence of names -> a tuple in canonical order; unknown names are refused."""
    if formats is None:
        return ()
    names = [f.strip().lower() for f in (formats.split(",") if isinstance(formats, str) else formats)]
    names = [n for n in names if n and not (n in FORMATS and FORMATS[n].always)]
    unknown = sorted(set(names) - set(EXTRA_FORMATS))
    if unknown:
        always = ", ".join(n for n, f in FORMATS.items() if f.always)
        raise InputError(
            f"unknown format {', '.join(map(repr, unknown))}",
            hint=f"choose from {', '.join(EXTRA_FORMATS)} ({always} is always written)",
        )
    return tuple(f for f in EXTRA_FORMATS if f in names)


def help_text() -> str:
    """The command line's ``--format`` help, from the registry."""
    return "Extra formats, comma-separated: " + ", ".join(EXTRA_FORMATS) + " (npy is always written)."


_MOVED = (writers, quantised, readers)


def __getattr__(name):
    """The writers' and readers' names, reachable here as before the split (``formats.HashedFile``)."""
    for module in _MOVED:
        try:
            return getattr(module, name)
        except AttributeError:
            continue
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "OutputFormat",
    "FORMATS",
    "EXTRA_FORMATS",
    "DEFAULT_CSV_MAX_ROWS",
    "CSV_ROW_LIMIT_OPTION",
    "get",
    "parse_formats",
    "help_text",
]
