"""Verify a bundle (or foreign tap gains) against the theory its profile promises.

``emucompile verify OUTDIR`` and :func:`verify_bundle` run, in order:

1. **Integrity** (bundles only): the manifest against its schema, every listed
   file's size, npy header (shape, dtype) and SHA-256
   (:func:`emucompile.bundle.verify_integrity`). Any mismatch raises
   :class:`IntegrityError` (exit 2) naming the file: "corrupted or edited after
   compiling". Foreign gains have no manifest: integrity is "not applicable".
2. **A decimated copy of every tap** (and link): a Kaiser-windowed low-pass FIR
   (passband to the largest frequency in the gains, stopband from half the
   record rate, 70 dB) and keeps every q-th sample, so the record rate is
   about :data:`RECORD_RATE_FACTOR` x that frequency. The statistics need only
   that band, so verify reads each sample once and works on q times fewer
   samples than compile wrote (the speed target: verify no slower than
   compile). Periodic bundles are filtered circularly, so the copy is periodic
   too and the checks look across the wrap.
3. **Checks** from :mod:`emucompile.tolerance` (tolerances calibrated by Monte
   Carlo of an exact reference process): per tap and link ``check_tap`` (mean
   power, K-factor, envelope KS, autocorrelation, Doppler PSD and the power
   beyond f_D, level-crossing rate, average fade duration, phase);
   ``check_cross_correlation`` between taps (expected 0) and, for MIMO, between
   links of a tap (expected: the profile's spatial correlation); for a FIR map,
   the grid's RMS delay spread and power against the profile (deterministic
   comparisons, no false alarm). With ``delivered=True`` the same per-tap
   checks run again on what the emulator receives (the ci16 codes decoded with
   their scale). A check that cannot be meaningful says so (``passed`` None and
   a ``reason``), never "pass".
4. **Verdict**: the p-values are combined by Holm's step-down method at the
   family-wise false-alarm rate ``false_alarm`` (default 0.01), so an intact
   bundle from a perfect generator fails with probability <= ``false_alarm``.

Result fields (the contract with :mod:`emucompile.plots` and :mod:`emucompile.report`)
--------------------------------------------------------------------------------------
:class:`Verification` has these attributes (all read-only by convention):

``checks`` : list[emucompile.tolerance.CheckResult]
    Every check, after Holm (``passed`` True / False / None, ``reason``).
``passed`` : bool
    True when no check failed (checks with ``passed`` None do not fail).
``false_alarm`` : float
    The family-wise false-alarm rate the verdict was made at.
``identity`` : dict
    Strict-JSON: ``source`` ("bundle" or "foreign"), ``path``, ``manifest_sha256``,
    ``files`` (list of {name, role, sha256, size_bytes}), ``seed``, ``method``,
    ``generator_version``, ``tool_version`` (of the bundle), ``verify_tool_version``,
    ``profile_sha256``, ``resolved_profile_sha256``, ``platform`` (the bundle's),
    ``verify_platform``, ``created_utc``, ``periodic``, ``n_samples``, ``n_rx``,
    ``n_tx``, ``integrity`` ("intact" or "not applicable (foreign data)"),
    ``delivered`` (list of formats checked as delivered).
``profile`` : emucompile.profile.Profile
``profile_stats`` : dict
    :func:`emucompile.stats.profile_statistics` of the profile (as ``stats --json``).
``update_rate_hz`` : float
    Rate of the gains as stored.
``duration_s`` : float
``records`` : dict[int, numpy.ndarray]
    Tap index -> decimated complex128 1-D record of link 0 (shadowing removed
    when the bundle has shadowing and the components are available).
``link_records`` : dict[int, numpy.ndarray] or None
    MIMO only: tap index -> (m, n_links) decimated records of every link.
``record_rate_hz`` : float
    Sample rate of ``records``.
``models`` : dict[int, emucompile.tolerance.TapModel]
    Tap index -> the theory the tap should follow (spectrum, mean power, K,
    direct-part Doppler); static taps included.
``fir_map`` : numpy.ndarray or None
    (n_taps, n_fir) map from tap gains to FIR coefficients, when the bundle has one.
``sample_rate_hz`` : float or None
    The FIR grid's sample rate.
``fir_delays_s`` : numpy.ndarray or None
    Delay of each FIR coefficient (bulk delay included), for the |H(f, t)| image.
``foreign`` : bool
    True for ``verify --gains`` (no manifest: integrity not applicable).
``cautions`` : list[str]
    Plain sentences the report prints (estimated gains carry noise, checks
    skipped and why, ...).
``elapsed_s`` : float
    Wall time of the verification.

``to_dict()`` gives the strict-JSON ``verification.json`` (contract 1's
``verify --json`` keys ``passed``, ``false_alarm``, ``checks`` plus
``identity``, ``profile_stats``, ``update_rate_hz``, ``record_rate_hz``,
``cautions``).

Where the files go
------------------
``write_outputs`` (and the command line) writes the HTML report, ``verification.json``
and the figures' PNGs into ``OUTDIR/verification/`` by default (for foreign
gains, ``GAINS.verification/`` beside the file). That directory is not in the
manifest's hashed file list; the integrity check reads only listed files, and
``compile --force`` accepts it as part of a bundle it may replace (the old
verification goes with the old numbers). With ``--report FILE`` the HTML goes
to FILE and ``verification.json`` beside it as ``STEM.verification.json``.
"""
