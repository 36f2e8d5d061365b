"""The Doppler spectrum registry: every kind's closed forms agree with each other and with the schemas.

Each registered kind is checked the same way (a new kind is tested by registering it): its
density integrates to 1, its autocorrelation is the Fourier transform of its density
(Wiener-Khinchin), its second moment, distribution function and quantile are the integrals
they claim, and its record goes through the manifest and back unchanged. Integrals by
``scipy.integrate.quad`` over f = f_D sin(phi) (the classical edge singularity becomes a
constant), to 1e-9 relative (quad's requested accuracy is 1e-11; common practice margin).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate

from emucompile.models import spectra
from emucompile.models.theory import DopplerSpectrum

ROOT = Path(__file__).resolve().parents[2]
FD = 100.0
KINDS = [pytest.param(kind, id=kind.name) for kind in spectra.SPECTRA.values()]


def _spectrum(kind):
    return DopplerSpectrum(kind.name, FD, **kind.example)


def _integral(spectrum, weight, upper=FD):
    """integral of S(f) weight(f) over -f_D < f < upper, with f = f_D sin(phi)."""
    top = math.asin(max(-1.0, min(1.0, upper / FD)))

    def integrand(phi):
        f = FD * math.sin(phi)
        return float(spectrum.psd(np.array([f]))[0]) * FD * math.cos(phi) * weight(f)

    value, _ = integrate.quad(integrand, -math.pi / 2, top, points=[0.0] if top > 0 else None,
                              limit=400, epsabs=1e-13, epsrel=1e-11)
    return value


@pytest.mark.parametrize("kind", KINDS)
def test_the_density_has_unit_power_and_vanishes_outside_the_band(kind):
    spectrum = _spectrum(kind)
    assert _integral(spectrum, lambda f: 1.0) == pytest.approx(1.0, rel=1e-9)
    assert np.all(spectrum.psd(np.array([-1.5 * FD, -FD, FD, 2.0 * FD])) == 0.0)


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("lag_periods", [0.0, 0.07, 0.31, 1.3, 2.9])
def test_the_autocorrelation_is_the_fourier_transform_of_the_density(kind, lag_periods):
    spectrum = _spectrum(kind)
    tau = lag_periods / FD
    expected = _integral(spectrum, lambda f: math.cos(2.0 * math.pi * f * tau))
    assert float(spectrum.autocorrelation(np.array([tau]))[0]) == pytest.approx(expected, abs=1e-9)
    assert kind.symmetric  # the real autocorrelation above holds for a symmetric spectrum only


@pytest.mark.parametrize("kind", KINDS)
def test_second_moment_distribution_function_and_quantile_are_the_density_s_integrals(kind):
    spectrum = _spectrum(kind)
    assert spectrum.second_moment_hz2 == pytest.approx(_integral(spectrum, lambda f: f * f), rel=1e-9)
    for f in (-0.8 * FD, -0.1 * FD, 0.0, 0.45 * FD, 0.95 * FD):
        assert float(spectrum.cdf(f)) == pytest.approx(_integral(spectrum, lambda _: 1.0, upper=f), abs=1e-9)
        one_sided = 2.0 * float(spectrum.cdf(abs(f))) - 1.0  # G(|f|), the one-sided share below |f|
        assert float(spectrum.quantile(one_sided)) == pytest.approx(abs(f), abs=1e-9 * FD)
    assert float(spectrum.cdf(-2 * FD)) == 0.0 and float(spectrum.cdf(2 * FD)) == pytest.approx(1.0, abs=1e-15)


@pytest.mark.parametrize("kind", KINDS)
def test_the_record_goes_through_the_manifest_and_back(kind):
    spectrum = _spectrum(kind)
    entry = json.loads(json.dumps({**spectrum.record(), "max_doppler_hz": FD}))
    assert entry["spectrum"] == kind.name and "sigma_hz" in entry  # kept in every record of format 1
    assert DopplerSpectrum.of(entry) == spectrum
    assert spectra.check_parameters(kind.name, FD, kind.example) == []


def test_missing_and_foreign_parameters_are_reported_by_the_registry():
    assert [p[1:3] for p in spectra.check_parameters("gaussian", FD, {})] == [
        ("error", "a gaussian spectrum needs sigma_hz (its standard deviation in Hz)")]
    found = spectra.check_parameters("flat", FD, {"sigma_hz": 3.0})
    assert [(p[0], p[4]) for p in found] == [("sigma_hz", True)] and "gaussian spectrum only" in found[0][2]
    with pytest.raises(ValueError, match="kind must be one of"):
        DopplerSpectrum("unknown", FD)


def test_the_schemas_name_exactly_the_registered_kinds():
    # One home: the profile schema's $defs/spectrum_kind (kinds) and $defs/spectrum_parameters
    # (their parameters); the tap, the tap override and the manifest refer to them, nothing repeats them.
    profile = json.loads((ROOT / "emucompile" / "schemas" / "profile-v1.schema.json").read_text("utf-8"))
    manifest = json.loads((ROOT / "emucompile" / "schemas" / "bundle-manifest-v1.schema.json").read_text("utf-8"))
    defs = profile["$defs"]
    assert defs["spectrum_kind"]["enum"] == list(spectra.KINDS)
    assert list(defs["spectrum_parameters"]["properties"]) == list(spectra.PARAMETER_NAMES)
    for block in ("tap", "tap_override"):
        properties = defs[block]["properties"]
        assert properties["spectrum"]["$ref"] == "#/$defs/spectrum_kind"
        assert properties["spectrum"]["default"] == spectra.DEFAULT_KIND
        for name in spectra.PARAMETER_NAMES:
            assert properties[name] == {"$ref": f"#/$defs/spectrum_parameters/properties/{name}"}
    in_manifest = manifest["$defs"]["tap"]["properties"]["spectrum"]["anyOf"]
    assert in_manifest == [{"$ref": "profile-v1.schema.json#/$defs/spectrum_kind"}, {"type": "null"}]
    copies = [node for schema in (profile, manifest) for node in _dicts(schema)
              if set(spectra.KINDS) & set(map(str, node.get("enum", ())))]
    assert copies == [defs["spectrum_kind"]]  # no second list of kinds anywhere


def test_the_validators_accept_exactly_the_registered_kinds():
    # A tap, a tap override and a manifest tap record, each checked against its own $defs entry with
    # the package's registry of schemas (the manifest's reference to the profile's kinds resolved offline).
    import jsonschema
    from referencing import Resource

    from emucompile.bundle.layout import manifest_schema, schema_registry

    manifest = manifest_schema()
    registry = schema_registry().with_resource(manifest["$id"], Resource.from_contents(manifest))
    profile_id = json.loads((ROOT / "emucompile" / "schemas" / "profile-v1.schema.json").read_text("utf-8"))["$id"]

    def validator(schema_id, name):
        return jsonschema.Draft202012Validator({"$ref": f"{schema_id}#/$defs/{name}"}, registry=registry)

    cases = [(validator(profile_id, "tap"), {"delay_ns": 0, "power_db": 0}),
             (validator(profile_id, "tap_override"), {"index": 0}),
             (validator(manifest["$id"], "tap"), {"delay_s": 0.0, "power_db": 0.0, "fading": "rayleigh",
                                                  "k_db": None, "max_doppler_hz": FD, "los_doppler_hz": None,
                                                  "los_phase_deg": None})]
    for check, record in cases:
        for kind in spectra.KINDS:
            assert list(check.iter_errors({**record, "spectrum": kind})) == [], (kind, record)
        assert [list(e.absolute_path) for e in check.iter_errors({**record, "spectrum": "lorentzian"})] == [
            ["spectrum"]]
    assert list(cases[2][0].iter_errors({**cases[2][1], "spectrum": None})) == []  # a static tap's record
    assert list(cases[0][0].iter_errors({**cases[0][1], "spectrum": None}))  # a profile's tap names a kind


def _dicts(node):
    if isinstance(node, dict):
        yield node
        for value in node.values():
            yield from _dicts(value)
    elif isinstance(node, list):
        for value in node:
            yield from _dicts(value)
