"""Named defaults and policies, each in one place (base layer: imports nothing of irpipe).

Every number that more than one module needs, or that a user might look for, is here
with its meaning and source, so that changing it changes it everywhere.
"""

#: default temperature range of the inverse tables [C] (``camera.range_c``)
TABLE_RANGE_C = (-60.0, 650.0)
#: widest ``camera.range_c`` accepted [C]; also the span of the statistics histograms, so
#: that every temperature any table can give falls into a bin
TABLE_LIMITS_C = (-100.0, 2000.0)
#: plausible range of temperatures typed into a config (air, reflected, ambient) [C]
CONFIG_TEMPERATURE_RANGE_C = (-100.0, 1000.0)

#: frames per chunk streamed through the stage chain (``output.frame_chunk``)
FRAME_CHUNK = 32

#: bin width of the region statistics' streaming histograms [K] (per-pixel plan and cluster
#: runs of it; the lookup plan's percentiles are exact). Region percentiles are read from
#: it by interpolating between the bin centres of the neighbouring order statistics, so
#: they differ from the exact (numpy "linear") percentile by at most half a bin, 0.005 K.
STATISTICS_BIN_K = 0.01
#: bin width of the report's temperature histogram [K]
PICTURE_BIN_K = 0.05

#: refractive index of a non-metal surface for the Fresnel view-angle correction
#: (typical of glass, paint and masonry binders; from memory)
REFRACTIVE_INDEX = 1.5

#: Critical temperature factor f_CRsi by building use (config spelling), UK practice (BRE
#: IP1/06, Ward 2006; conventions in BR 497). Given from memory; the 0.75 for dwellings is
#: corroborated by several practice pages. Verify against IP1/06 before use. The keys are
#: the values ``survey.building_use`` accepts.
CRITICAL_TEMPERATURE_FACTORS = {
    "storage": 0.30,
    "office": 0.50,
    "retail": 0.50,
    "dwelling": 0.75,
    "residential": 0.75,
    "school": 0.75,
    "sports-hall": 0.80,
    "kitchen": 0.80,
    "unflued-gas-heating": 0.80,
    "swimming-pool": 0.90,
    "laundry": 0.90,
}
#: building use assumed when the survey gives none
BUILDING_USE = "dwelling"

#: a "reflector" of this emissivity or more is no reflector (ASTM E1862 reflector method
#: needs a diffuse reflector of emissivity near 0; common practice, no source for the limit)
MAX_REFLECTOR_EMISSIVITY = 0.5
