"""Verifying numbers against theory: estimators, calibrated tolerances, the exact reference process, checks, Holm.

A bundle's FIR map and direct part come from its manifest (their closed forms
and recorded parameters, through :mod:`emucompile.models`); verify never runs
the compile planner and writes nothing (the report is :mod:`emucompile.report`'s).
May import: ``models``, ``profile``, ``bundle``, ``errors``.

Modules, lowest first: ``estimators`` (statistics of a record), ``reference``
(the exact reference process), ``verdicts`` (:class:`TapModel`,
:class:`CheckResult`, the checks' settings), ``nulls`` (null sums, laws,
calibration factors), ``tap_checks`` (the checks of one tap's record),
``tolerance`` (the public face: per-tap and correlation checks, Holm, and why
each tolerance is what it is), ``describe`` (checks in words, the matrix),
``decimate`` (the band-limited copy), ``components`` (a bundle's parts),
``checks`` / ``checks_mimo`` / ``checks_fir`` (the checks of a whole record),
``run`` (:func:`verify_bundle`, :func:`verify_gains`, :class:`Verification`).

Adding a check of one tap's record touches:

1. ``verify/verdicts.py``: its name in ``CHECK_NAMES`` (and any setting it needs);
2. ``verify/tap_checks.py``: ``_check_<name>(ctx)`` returning ``ctx.result(...)``
   with its null law (law, z, m, scale), called from ``check_tap``; a spread that
   needs a new sum over the autocorrelation goes into ``verify/nulls.py``
   (accumulated block by block in ``_pass``, asked for by ``nulls.prepare``, which
   ``null_sum_tasks`` runs; a new cache is listed in ``tolerance.clear_caches``);
3. ``tools/calibrate_tolerances.py`` and its output
   ``emucompile/data/tolerance_calibration.json``: the calibration factor
   (``nulls.factor(name)``);
4. ``verify/describe.py``: what it compares, in words (``_COMPARISONS``), and
   ``report/html.py``'s short name (``_SHORT``);
5. ``docs/verdicts.md``: its row in the table of units;
6. ``tests/verify/test_tolerance.py`` (it catches a deviation) and
   ``tests/verify/test_verdict_rule.py`` (the printed-tolerance rule holds).

To draw it, a ``<name>_curve`` in ``tap_checks.py`` gives the numbers the check
judged and ``report/tap_panels.py`` draws them with the check's tolerance.
A check of no single tap (MIMO links, the FIR map, the fit) is a function in
``checks_mimo.py`` or ``checks_fir.py``, called from ``checks.Session.run`` or
``run._verify_intact``, with items 4 to 6.

Notes
-----
Order: ``bundle.verify_integrity`` (schema, sizes, npy headers, SHA-256; any
problem is an ``IntegrityError``, exit 2, naming the file), then one pass over the
gains (``decimate``): a Kaiser low-pass (80 dB by design, >= 70 dB tested;
passband to the largest frequency f_b of the gains, stopband from F_out - f_b so
nothing aliases into the band) keeps every q-th sample, q = floor(F_u / (8 f_b)),
in polyphase form: one float32 matrix product per segment of ~256 KiB over every
link and tap, then a shifted sum per phase; the full-rate power is summed in
float64. Records are centred on input sample m q; periodic bundles wrap (q
divides n), so every check looks across the wrap. Static taps are divided by the
filter's exact response at their tone.

Checks: ``tolerance.check_tap`` per tap and link, ``check_cross_correlation`` for
every pair of fading taps (expected 0) and, for MIMO, for every pair of links of a
tap on the diffuse parts (direct part from the manifest, shadowing divided out
first). Holm (``tolerance.holm``) over everything with a p-value at the
false-alarm rate. Bounds outside Holm (no false alarm): ``power_beyond_record_band``
(images and noise up to the update rate's Nyquist, which the record's PSD cannot
see), ``fir_map_rebuilt`` (the map rebuilt from the manifest's record equals
``fir_map.npy`` to 1e-12), ``fir_power``, ``fir_rms_delay_spread``. ``delivered``
repeats the per-tap checks on the ci16 codes and on the (fitted) FIR file.

Printed-tolerance rule (``docs/verdicts.md``): ``passed`` is
|value - expected| <= tolerance (value <= tolerance without an expected value),
the tolerance at the level that decides the check after Holm. Values are on the
scale their statistic is symmetric on (ratio, log ratio, standard score,
Mahalanobis distance), which changes no statistic: the calibration stands.

MIMO correlation: the Mahalanobis distance of rho_hat - rho with radial variance
g (1 - |rho|^2)^2 / 2 and tangential g (1 - |rho|^2) / 2 (Isserlis' theorem, the
delta method); one spread for |rho_hat - rho| failed 2x4 medium bundles at
|rho| ~ 0.9-0.99 on every seed. Its factor comes from
``tools/calibrate_mimo_correlation.py``.

Not judged, and said so: T f_D < 50, K of Rayleigh taps, envelope checks of
static taps, a direct part on a Doppler trajectory, the shadowing trajectory
itself (divided out), MIMO correlation of foreign gains. The command sets
``OPENBLAS_NUM_THREADS=1`` when numpy is not loaded yet: BLAS threads only contend
on the many short products. Measured false-alarm rates and speed:
``benchmarks/README.md``.
"""
