"""Pictures and pages: figures drawing what verify computed, the HTML report, the profile card.

May import: ``verify``, ``profile``, ``bundle``, ``models``, ``errors``.
"""
