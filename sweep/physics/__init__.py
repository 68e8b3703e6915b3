"""Physical relations of the planet-yield model: small, pure, vectorised functions.

Every function takes scalars or numpy arrays (broadcast against each other), works in float64,
names its units in its arguments (``_au``, ``_K``, ``_rsun``...) and cites the published relation
it implements. Nothing here does I/O or imports the engine, the store or dask.

Modules
-------
_constants
    Physical constants and unit conversions from :mod:`astropy.constants`, as plain floats.
orbits
    Kepler's third law, Kepler's equation, sky-projected geometry of an orbit.
radiation
    Planck functions, band-averaged thermal flux densities, equilibrium temperature,
    Lambert phase function and reflected-light contrast.
stars
    Stefan-Boltzmann relations, textbook main-sequence relations, spectral classes.
habitability
    Habitable-zone limits of Kopparapu et al. (2014), insolation.
masses
    Mass from radius (Chen & Kipping 2017), radial-velocity semi-amplitude.
photometry
    Photon rates from flux densities, Vega magnitudes, resolution elements.
sky
    Local zodiacal and exozodiacal surface brightness.
noise
    Photon-noise budget: leakage, backgrounds, signal-to-noise and time to a given SNR.
"""
