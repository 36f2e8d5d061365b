"""The MIMO checks: the achieved correlation of a tap's links against the profile's spatial correlation.

The direct part is deterministic: it is taken out of each link before the
correlation of the diffuse parts is estimated, decimated from the bundle's
components (:func:`emucompile.verify.components.open_components`: the
manifest's record, nothing regenerated). The expected correlation is the
components' (the profile's ``mimo`` block); the tolerance is
:func:`emucompile.verify.tolerance.check_cross_correlation`'s.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from emucompile.verify import decimate, estimators, scratch, tolerance


def mimo_checks(session, decimated):
    """The achieved correlation of every pair of links of every fading tap against the profile's (diffuse parts)."""
    if session.components is None:
        session.cautions.append("the achieved MIMO correlation is not checked: the expected correlation "
                                "of the links needs the bundle's components (not available for this input)")
        return []
    found = []
    for tap, model in session.models.items():
        if model is None or model.spectrum is None:
            continue
        # expected[a, b] = E[h_a conj(h_b)] / P of the diffuse parts (components' convention)
        expected = np.asarray(session.components.expected_correlation(tap))
        diffuse_model = _diffuse_model(model)
        diffuse = diffuse_links(session, decimated[tap], tap)
        for a in range(session.n_links):
            for b in range(a + 1, session.n_links):
                result = tolerance.check_cross_correlation(
                    diffuse[a], diffuse[b], session.record_rate_hz, diffuse_model, diffuse_model,
                    taps=(tap, tap), expected=complex(expected[a, b]), level=session.false_alarm,
                    name="mimo_correlation", periodic=session.periodic)
                found.append(dataclasses.replace(
                    result, name=f"mimo_correlation [links {session.link_label(a)}~{session.link_label(b)}]"))
    return found


def diffuse_links(session, links, tap):
    """The links' records minus the (decimated) direct part, which is deterministic.

    (n_links, m) complex128, made block by block (a long one in a mapped
    temporary file, :func:`emucompile.verify.scratch.empty`); the links as they are without a direct part.
    """
    model = session.models[tap]
    if not (model.k_linear and model.k_linear > 0):
        return links
    if session.direct is None:
        session.direct = session.decimator.run(decimate.ComponentsDirect(session.components), session.n_links,
                                                len(session.models), None)
    direct = session.direct[tap]
    out = scratch.empty(links.shape, np.complex128)
    for start in range(0, links.shape[-1], estimators.BLOCK):
        part = slice(start, start + estimators.BLOCK)
        np.subtract(links[:, part], direct[:, part], out=out[:, part], dtype=np.complex128)
    return out


def mimo_section(session, link_records):
    """Expected and achieved correlation of the links' diffuse parts, per fading tap (MIMO bundles)."""
    if session.components is None or not link_records or session.n_links < 2:
        return None
    taps = {}
    for tap, model in session.models.items():
        if model is None or model.spectrum is None or tap not in link_records:
            continue
        diffuse = diffuse_links(session, np.asarray(link_records[tap]).T, tap)
        gram = np.zeros((diffuse.shape[0],) * 2, np.complex128)
        for start in range(0, diffuse.shape[1], estimators.BLOCK):
            block = diffuse[:, start:start + estimators.BLOCK].astype(np.complex128)
            gram += block @ block.conj().T
        gram /= diffuse.shape[1]
        scale = np.sqrt(np.maximum(np.real(np.diag(gram)), 1e-300))
        taps[tap] = {"expected": np.asarray(session.components.expected_correlation(tap)),
                     "achieved": gram / np.outer(scale, scale)}
    if not taps:
        return None
    return {"links": [session.link_label(link) for link in range(session.n_links)], "taps": taps,
            "convention": "rho[a, b] = E[h_a conj(h_b)] / sqrt(P_a P_b) of the diffuse parts (shadowing divided out)"}


def _diffuse_model(model):
    """The model of a tap's diffuse part alone: Rayleigh with power P / (K + 1)."""
    return dataclasses.replace(model, mean_power=model.diffuse_power, k_linear=0.0, los_doppler_hz=0.0)
