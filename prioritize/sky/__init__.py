"""The sky of a site: observability, the night plan and the semester table.

Layout (one module per concept):

- ``offline``       astropy's IERS settings for working without network, and the dates supported
- ``sites``         observing sites (TOML presets in ``configs/sites/`` and user files)
- ``observability`` Sun, Moon and target altitudes, air mass, twilight and Moon events (pure numpy
                    after a few astropy calls for time scales, sidereal time, frames, Sun and Moon)
- ``moonlight``     sky brightness near 6708 A with the Moon up (Krisciunas & Schaefer 1991)
- ``slots``         the exposure each slot needs and the S/N it reaches (air mass, extinction, sky)
- ``milp``          the night plan as a time-slot mixed-integer programme (scipy / HiGHS)
- ``schedule``      the night plan: which target to observe when, and why the others are left out
- ``nights``        several nights in a row, targets carried until their S/N is reached
- ``season``        hours each target is observable in dark time per month of a semester
- ``commands``      the ``night`` and ``season`` command-line functions (I/O edge)

Importing ``offline`` (which every module that computes times does) configures astropy to use only its bundled IERS tables
(settings measured with astropy 6-8, tests/test_sky.py): nothing here
touches the network.  All times and hours are
planning estimates; the observatory's own tools and rules prevail.
"""
