"""The checks of one set of decimated records: per tap and link, across taps, on what is delivered.

:class:`Session` decimates each source (:mod:`emucompile.verify.decimate`) and
runs :mod:`emucompile.verify.tolerance`'s checks on the copies: per tap and link
(``check_tap``), the power the band-limited copy lacks, the cross-tap
correlations, the MIMO link correlations (:mod:`emucompile.verify.checks_mimo`)
and, for ``--delivered``, the materialised FIR column by column. Also the tap
models (:class:`emucompile.verify.tolerance.TapModel`) a manifest's tap entries
or a profile's taps stand for.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import multiprocessing
import os
import time
from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

import numpy as np

from emucompile.models.theory import DopplerSpectrum
from emucompile.verify import checks_mimo, decimate, estimators, tolerance

CHECK_THREADS = 2  # threads for the per-tap and cross-tap checks without worker processes

class Session:
    """Decimates each source and runs the per-tap, cross-tap and MIMO checks on the copies."""

    def __init__(self, *, profile, models, update_rate_hz, n_samples, n_rx, n_tx, periodic, false_alarm,
                 cautions, progress, mimo, components, workers=None):
        self.profile = profile
        self.models = models
        self.update_rate_hz = update_rate_hz
        self.n_samples = n_samples
        self.n_rx, self.n_tx = n_rx, n_tx
        self.n_links = n_rx * n_tx
        self.periodic = periodic
        self.false_alarm = false_alarm
        self.cautions = cautions
        self.progress = progress
        self.mimo = mimo
        self.components = components
        self.workers = workers
        self.timings_s = {}
        self.band_hz = largest_frequency_hz(profile, models)
        self.decimator = decimate.Decimator(update_rate_hz, self.band_hz, n_samples, periodic)
        self.record_rate_hz = self.decimator.record_rate_hz
        self.direct = None  # the decimated direct part, made once when a MIMO check needs it

    def run(self, sources):
        """Checks of every source; records (tap -> link 0 record) and MIMO link records of the first."""
        checks, records, link_records = [], {}, None
        for position, (label, source) in enumerate(sources):
            began = time.perf_counter()
            decimated = self.decimator.run(source, self.n_links, len(self.models), self.progress)  # (taps, links, m)
            self.timings_s["decimation"] = self.timings_s.get("decimation", 0.0) + time.perf_counter() - began
            began = time.perf_counter()
            for tap, model in self.models.items():
                if model is not None and model.spectrum is None:
                    # a static tap is one tone: undo the decimator's passband ripple at its frequency exactly
                    decimated[tap] /= self.decimator.response(model.los_doppler_hz)
            prefix = "" if position == 0 else f"delivered {label}: "
            # the cross-tap correlations of the first source are computed beside the taps' checks
            cross = functools.partial(self._cross_tap_checks, decimated) if position == 0 else None
            tap_checks, cross = self._tap_checks(decimated, prefix, alongside=cross)
            checks += tap_checks
            checks += self._beyond_band_checks(decimated, prefix)
            if position == 0:
                records = {i: decimated[i, 0] for i in range(decimated.shape[0])}
                if self.n_links > 1:
                    link_records = {i: decimated[i].T for i in range(decimated.shape[0])}
                checks += cross
                if self.n_links > 1:
                    checks += self._mimo_checks(decimated)
            self.timings_s["checks"] = self.timings_s.get("checks", 0.0) + time.perf_counter() - began
        return checks, records, link_records

    def _tap_checks(self, decimated, prefix, alongside=None):
        """The per-tap checks of every link, and the result of ``alongside()`` (run beside them)."""
        tol = tolerance
        found, jobs = [], []
        for tap, model in self.models.items():
            if model is None:
                found += [tol.CheckResult(prefix + name, tap, None, None, None, None, None,
                                          "not applicable: the direct part follows a Doppler trajectory "
                                          "(no stationary model)", self.false_alarm)
                          for name in tol.CHECK_NAMES if name != "cross_correlation"]
                continue
            jobs += [(tap, link, model) for link in range(self.n_links)]
        prepare = {}  # the null sums the jobs share, once each (keyed by function and arguments)
        for _, _, model in jobs:
            for task in tol.null_sum_tasks(model, self.record_rate_hz, decimated.shape[-1], self.periodic):
                prepare.setdefault((task.func, task.args), task)
        outcomes, extra = map_jobs(tap_job, (decimated, self.record_rate_hz, self.periodic, self.false_alarm), jobs,
                                   self._workers(decimated), prepare=list(prepare.values()), alongside=alongside)
        for (_, link, _), results in zip(jobs, outcomes):
            found += [renamed(r, prefix, self.link_label(link)) for r in results]
        return found, extra

    def _workers(self, decimated):
        return 1 if self.workers is None else max(1, int(self.workers))

    def delivered_fir(self, source, matrix, *, label="fir", columns=None):
        """Per-tap checks on the materialised FIR (``fir.npy``), column by column.

        A column that one tap alone reaches carries that tap's gain times its
        weight w: the tap's model with power w^2 P. A column that sums several
        taps has no single-tap model; it is marked not applicable (its taps are
        checked one by one on the gains). ``columns`` names the FIR column of
        each of ``matrix``'s columns (default: the same index); ``label`` goes
        into the check names ("delivered LABEL[COLUMN]: ...").
        """
        tol = tolerance
        n_fir = matrix.shape[1]
        columns = list(range(n_fir)) if columns is None else list(columns)
        decimated = self.decimator.run(source, self.n_links, n_fir, None)  # (columns, links, m)
        found = []
        for column in range(n_fir):
            contributors = np.flatnonzero(matrix[:, column])
            if contributors.size == 0:
                continue
            prefix = f"delivered {label}[{columns[column]}]: "
            merged = merged_model([self.models[int(i)] for i in contributors], matrix[contributors, column])
            if merged is not None:
                # independent Rayleigh taps of one Doppler spectrum add to a Rayleigh tap of the summed power
                records = decimated[column]
                for link in range(self.n_links):
                    results = tol.check_tap(records[link], self.record_rate_hz, merged, periodic=self.periodic,
                                            tap=tuple(int(i) for i in contributors), level=self.false_alarm)
                    found += [renamed(r, prefix, self.link_label(link)) for r in results]
                continue
            if contributors.size > 1:
                found.append(tol.CheckResult(
                    prefix + "column", tuple(int(i) for i in contributors), None, None, None, None, None,
                    f"not applicable: the coefficient sums {contributors.size} taps (no single-tap model; "
                    "the taps are checked one by one)", self.false_alarm))
                continue
            tap = int(contributors[0])
            model = self.models[tap]
            if model is None:
                continue
            weight = float(matrix[tap, column])
            scaled = dataclasses.replace(model, mean_power=model.mean_power * weight * weight)
            records = decimated[column]
            if model.spectrum is None:
                records /= self.decimator.response(model.los_doppler_hz)  # in place: the copy is ours
            for link in range(self.n_links):
                results = tol.check_tap(records[link], self.record_rate_hz, scaled, periodic=self.periodic,
                                        tap=tap, level=self.false_alarm)
                found += [renamed(r, prefix, self.link_label(link)) for r in results]
        return found

    def _beyond_band_checks(self, decimated, prefix):
        """Power the band-limited copy lacks, from the full-rate power of the same samples.

        (P_full - P_record) / P_full against 0, within OUT_OF_BAND_LIMIT_DB
        (-40 dB, the tolerance module's requirement on the power beyond f_D)
        plus the decimator's largest passband power deviation plus 1 / N_record
        for a non-periodic record (the midpoint-rule end effect of comparing a
        sampled mean with the full-rate mean, ~0.1 / N for 8 samples per period
        of |g|^2; taken 10x larger). It sees images and noise anywhere up to the
        update rate's Nyquist frequency, which the record's own PSD checks cannot.
        A bound, not a hypothesis test (p_value None, not in Holm).
        """
        decimator = self.decimator
        if decimator.h is None:
            return []
        tol = tolerance
        allowance = 10 ** (tol.OUT_OF_BAND_LIMIT_DB / 10) + decimator.passband_power_deviation
        allowance += 0.0 if self.periodic else 1.0 / max(1, decimator.n_out)
        found = []
        for tap, model in self.models.items():
            if model is None or model.spectrum is None:
                continue
            for link in range(self.n_links):
                full = float(decimator.full_power[link, tap])
                if not full > 0:
                    continue
                kept = estimators.mean_power(decimated[tap, link])
                value = (full - kept) / full
                label = "" if self.n_links == 1 else f" [{self.link_label(link)}]"
                name = prefix + "power_beyond_record_band" + label
                passed = abs(value) <= allowance
                found.append(tol.CheckResult(
                    name, tap, value, 0.0, allowance, None, passed,
                    None if passed else f"{db_text(value)} of the tap's power lies beyond the record band",
                    None, allowance, "fraction of power",
                    {"record_band_hz": decimator.record_rate_hz - decimator.band_hz,
                     "full_rate_power": full, "record_power": kept,
                     "source": "full-rate mean |g|^2 against the decimated copy's (same samples)"}))
        return found

    def _cross_tap_checks(self, decimated):
        fading = [i for i, m in self.models.items() if m is not None and is_fading(m)]
        if len(fading) < 2:
            return []
        tol = tolerance
        rho = tol.correlation_matrix([decimated[i, 0] for i in fading], self.record_rate_hz,
                                     [self.models[i] for i in fading])
        return [tol.check_cross_correlation(decimated[a, 0], decimated[b, 0], self.record_rate_hz, self.models[a],
                                            self.models[b], taps=(a, b), expected=0.0, level=self.false_alarm,
                                            estimate=rho[i, j], periodic=self.periodic)
                for i, a in enumerate(fading) for j, b in enumerate(fading) if j > i]

    def _mimo_checks(self, decimated):
        return checks_mimo.mimo_checks(self, decimated)

    def diffuse_links(self, links, tap):
        """The links' records minus the decimated direct part (:func:`emucompile.verify.checks_mimo.diffuse_links`)."""
        return checks_mimo.diffuse_links(self, links, tap)

    def link_label(self, link):
        if self.n_links == 1:
            return None
        tx, rx = divmod(link, self.n_rx)
        return f"rx{rx}-tx{tx}"


def tap_job(shared, tap, link, model):
    decimated, rate_hz, periodic, level = shared
    return tolerance.check_tap(decimated[tap, link], rate_hz, model, periodic=periodic, tap=tap, level=level)


_SHARED = None


def _run_shared(index):
    function, shared, jobs = _SHARED
    return function(shared, *jobs[index])


def map_jobs(function, shared, jobs, workers, prepare=(), alongside=None):
    """``([function(shared, *job) for job in jobs], alongside())``, in forked worker processes when ``workers`` > 1.

    ``prepare``: zero-argument callables run first (in threads), which fill the
    caches the jobs share (the tolerance module's null sums), so that no two
    jobs compute the same one. ``alongside``: one more zero-argument callable,
    run beside the jobs (its result second; None without it). The records reach
    worker processes by fork (copy-on-write), with the caches filled, not by
    pickling; only the results travel back. Same results in the same order
    either way.
    """
    global _SHARED
    threads = min(CHECK_THREADS, os.cpu_count() or 1)
    if threads > 1 and len(prepare) > 1:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            list(pool.map(lambda task: task(), prepare))
    else:
        for task in prepare:
            task()
    if workers <= 1 or len(jobs) < 3:
        if threads <= 1 or len(jobs) < 3:
            return [function(shared, *job) for job in jobs], None if alongside is None else alongside()
        # the FFTs, sorts and array passes release the GIL; results in job order either way
        with ThreadPoolExecutor(max_workers=threads) as pool:
            beside = None if alongside is None else pool.submit(alongside)  # queued first: no core waits at the end
            results = list(pool.map(lambda job: function(shared, *job), jobs))
            return results, None if beside is None else beside.result()
    _SHARED = (function, shared, jobs)
    try:
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("fork")) as pool:
            pending = pool.map(_run_shared, range(len(jobs)))  # the workers are forked here, before any thread starts
            extra = None if alongside is None else alongside()  # this process would only wait
            return list(pending), extra
    finally:
        _SHARED = None


def tap_model(entry):
    """The theory of one tap from its manifest entry (values as compiled: rounded Doppler, drawn phase).

    Returns None for a direct part whose Doppler follows a trajectory (no
    stationary model: its checks are marked not applicable).
    """
    power = entry.get("power_linear")
    if power is None:
        power = 0.0 if entry.get("power_db") is None else 10.0 ** (entry["power_db"] / 10.0)
    k = k_linear(entry["fading"], entry.get("k_db"))
    los = entry.get("los_doppler_hz")
    if k > 0 and los is None:
        return None
    spectrum = None
    if entry["fading"] != "static":
        spectrum = DopplerSpectrum.of(entry)
    return tolerance.TapModel(spectrum=spectrum, mean_power=float(power), k_linear=k,
                        los_doppler_hz=float(los) if k > 0 else 0.0)


def tap_model_from_profile(tap):
    try:
        return tolerance.TapModel.from_tap(tap)
    except ValueError:  # a direct part on a Doppler trajectory
        return None


def k_linear(fading, k_db):
    if fading == "rician":
        return 10.0 ** (float(k_db) / 10.0)
    if fading == "static":
        return math.inf
    return 0.0


def is_fading(model):
    return model.spectrum is not None


def largest_frequency_hz(profile, models):
    band = 0.0
    for model in models.values():
        if model is None:
            continue
        if model.spectrum is not None:
            band = max(band, model.spectrum.band_edge_hz)
        band = max(band, abs(model.los_doppler_hz))
    largest = getattr(profile, "largest_doppler_hz", None)
    if largest is not None and math.isfinite(largest):
        band = max(band, float(largest))
    return band


def renamed(result, prefix, link):
    name = prefix + result.name + ("" if link is None else f" [{link}]")
    return dataclasses.replace(result, name=name) if name != result.name else result


def holm(checks, false_alarm):
    return tolerance.holm(checks, family_wise=false_alarm) if checks else []


def db_text(fraction):
    return f"{10 * math.log10(fraction):.1f} dB" if fraction > 0 else f"{fraction:.2g}"


def merged_model(models, weights):
    """The model of a FIR column that sums several taps, when it has one: every tap Rayleigh (K = 0) with
    the same Doppler spectrum; the sum of independent zero-mean complex Gaussian processes with one
    spectrum is one of the summed power, sum w_i^2 P_i (common practice). None otherwise."""
    if len(models) < 2 or any(m is None or m.spectrum is None or m.k_linear for m in models):
        return None
    if any(m.spectrum != models[0].spectrum for m in models[1:]):
        return None
    power = float(sum(w * w * m.mean_power for m, w in zip(models, weights)))
    return dataclasses.replace(models[0], mean_power=power)
