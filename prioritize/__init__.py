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

__version__ = "0.1.0"

CAUTION = (
    "Planning estimates from stellar models; not a substitute for the observatory's "
    "own exposure-time calculator, rules or safety practice."
)
