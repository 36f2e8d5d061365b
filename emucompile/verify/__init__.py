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
   (cached; listed in ``null_sum_tasks`` and ``tolerance.clear_caches``);
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
"""
