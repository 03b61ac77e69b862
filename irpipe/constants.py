"""Physical constants, SI units, each with its source.

All values follow from the exact defining constants of the 2019 SI, as tabulated in
CODATA 2018 (Tiesinga, Mohr, Newell & Taylor, "CODATA recommended values of the
fundamental physical constants: 2018", Rev. Mod. Phys. 93, 025010, 2021,
doi:10.1103/RevModPhys.93.025010). They are identical in CODATA 2022, which
``scipy.constants`` carries; the tests check that.
"""
H = 6.62607015e-34          # Planck constant [J s], exact (CODATA 2018)
C = 299792458.0             # speed of light in vacuum [m s-1], exact (CODATA 2018)
K_B = 1.380649e-23          # Boltzmann constant [J K-1], exact (CODATA 2018)
N_A = 6.02214076e23         # Avogadro constant [mol-1], exact (CODATA 2018)

C1L = 2.0 * H * C**2        # first radiation constant for radiance [W m2 sr-1]
C2 = H * C / K_B            # second radiation constant [m K]
SIGMA = 2.0 * 3.141592653589793**5 * K_B**4 / (15.0 * H**3 * C**2)  # Stefan-Boltzmann [W m-2 K-4]

ZERO_CELSIUS = 273.15       # [K], definition of the Celsius scale
STANDARD_PRESSURE = 101325.0  # [Pa], standard atmosphere (ISO 2533)
