"""irpipe: radiometric post-processing of long-wave infrared survey stacks.

Layers (see DEVELOPERS.md): pure physics functions (``radiometry``, ``calibration``,
``atmosphere``, ``humidity``, ``emissivity``, ``correction``, ``regions``, ``findings``,
``uncertainty``) -> stages (``stages``) -> the pipeline and CLI (``pipeline``, ``cli``).
"""
__version__ = "0.1.0"
