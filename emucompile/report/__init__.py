"""Pictures and pages: figures drawing what verify computed, the HTML report, the profile card.

``figures`` (the verification's figures) and ``tap_panels`` (one panel per
statistic, drawn from the check's own estimate with its tolerance), ``html``
and ``html_text`` (the report page), ``outputs`` (after a verification: the
JSON, the page and the PNGs, written where the command line writes them),
``card`` (a profile's card). May import: ``verify``, ``profile``, ``bundle``,
``models``, ``errors``.
"""
