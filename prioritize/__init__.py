"""prioritize: rank planet-engulfment candidates for lithium follow-up.

The package layout is the map of the science (see DEVELOPERS.md):

- ``catalog``  reading, validating and writing candidate tables (I/O edge)
- ``stars``    photometry, stellar tracks, convective envelope, placing stars on tracks
- ``lithium``  baseline, enrichment by an engulfed planet, signature lifetime
- ``engine``   the whole physics chain as one function of a batch (table in, table out)
- ``cli``      the command-line front end

All numbers the package produces are planning estimates; the observatory's own
calculators, rules and safety practice prevail.
"""

import os as _os

__version__ = "0.1.0"


def _astropy_needs_a_home() -> None:
    """astropy creates ``~/.astropy`` when it is imported; with a home folder that
    cannot be written it stops with a PermissionError.  Then give it private config
    and cache folders under the system temporary folder (XDG_CONFIG_HOME and
    XDG_CACHE_HOME, which astropy honours when ``<folder>/astropy`` exists)."""
    home = _os.path.expanduser("~")
    astropy_dir = _os.path.join(home, ".astropy")
    usable = (_os.access(astropy_dir, _os.W_OK | _os.X_OK) if _os.path.isdir(astropy_dir)
              else _os.path.isdir(home) and _os.access(home, _os.W_OK | _os.X_OK))
    if usable:
        return
    import tempfile
    base = _os.path.join(tempfile.gettempdir(), f"prioritize-astropy-{_os.getuid() if hasattr(_os, 'getuid') else 0}")
    for kind in ("XDG_CONFIG_HOME", "XDG_CACHE_HOME"):
        if _os.environ.get(kind) and _os.access(_os.environ[kind], _os.W_OK):
            continue
        folder = _os.path.join(base, kind.lower())
        _os.makedirs(_os.path.join(folder, "astropy"), exist_ok=True)
        _os.environ[kind] = folder


_astropy_needs_a_home()

CAUTION = (
    "Planning estimates from stellar models; not a substitute for the observatory's "
    "own exposure-time calculator, rules or safety practice."
)
