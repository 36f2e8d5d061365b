"""Pictures and pages: figures drawing what verify computed, the HTML report, the profile card.

``figures`` (the verification's figures) and ``tap_panels`` (one panel per
statistic, drawn from the check's own estimate with its tolerance), ``html``
and ``html_text`` (the report page), ``outputs`` (after a verification: the
JSON, the page and the PNGs, written where the command line writes them),
``card`` (a profile's card). May import: ``verify``, ``profile``, ``bundle``,
``models``, ``errors``.

Notes
-----
The report holds the verdict and counts; the foreign-data note (measured gains
carry noise and estimator bias the checks do not model); the profile, its
statistics and taps; the checks table (verdict, value, expected, tolerance,
smallest detectable, unit, p-value, the Holm level, reason); the family-wise
false-alarm rate and what Holm's method means; the figures; the identity
(hashes, seed, versions, files); the cautions (``html.CAUTIONS``); a signature
block. It is self-contained: inline CSS, figures as base64 ``data:`` URIs, no
script, no URL; every string from the data is HTML-escaped; written atomically.

Figures: one per statistic, up to 4 taps per panel, each tap in its colour
(measured a wide pale line, theory dashed on it), one y range per figure; levels
in dB re the RMS envelope the *profile* promises (a tap with the wrong power shows
shifted). Each panel draws the numbers its check judged, with the check's printed
tolerance shaded (``docs/verdicts.md``). ``Figure`` and the Agg canvas only, no
pyplot; one process, one thread (threads do not overlap matplotlib's GIL-bound
work; a forked second process measured no gain). Tests load the report in
headless Chromium and print it to A4 (``tests/report/test_report_browser.py``).
"""
