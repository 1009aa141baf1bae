"""Building blocks of predictive combustion, standalone (not yet used by the cycle solver).

- :mod:`.laminar_flame`: laminar burning velocity correlations (Metghalchi & Keck 1982,
  Gülder 1984) with burned-gas dilution.
- :mod:`.flame_geometry`: a spherical flame centred at the spark plug in a flat or pent-roof
  chamber with a flat or bowl piston: burned volume, flame front area and wetted areas,
  tabulated against flame radius and clearance height.
- :mod:`.zeldovich`: NO formation by the extended Zeldovich mechanism with the tool's own
  equilibrium, and its integration over burned-mass elements.

The physics functions take and return plain floats or numpy arrays in SI units, hold no
objects, and compile with numba as they are (the tests compile them).
"""
