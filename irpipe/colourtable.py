"""Colour tables for pictures of temperature and of temperature differences, and the
mapping of a float image to 8-bit colour indices.

Base layer: numpy only (no matplotlib at run time), so that the report, and any later page
that shows a thermogram, draws with the same colours from one place.

Two tables of 256 RGB entries:

* ``SEQUENTIAL``: perceptually uniform, dark (cold) to bright (warm), for temperatures.
  The 256 entries of the ``inferno`` map of matplotlib [1]_ (CC0), copied once as data.
* ``DIVERGING``: centred on zero, blue (negative) through light grey to red (positive), for
  difference maps. The 256 entries of Moreland's smooth cool-warm diverging map [2]_, as
  tabulated by matplotlib (``coolwarm``), copied once as data.

An indexed picture uses the first ``LEVELS`` palette entries for the colour scale (the
table resampled to ``LEVELS`` steps) and reserves three entries after them: ``INVALID``
(grey, for NaN: a pixel without a valid value), ``WHITE`` and ``BLACK`` (outlines drawn
into the picture). :func:`palette` returns that (256, 3) palette, :func:`to_indices` the
index image.

References
----------
.. [1] S. van der Walt, N. Smith, "A better default colormap for Matplotlib", SciPy 2015;
       the viridis family (viridis, magma, inferno, plasma), released under CC0.
.. [2] K. Moreland, "Diverging Color Maps for Scientific Visualization", Advances in Visual
       Computing (ISVC 2009), LNCS 5876, pp. 92-103, doi:10.1007/978-3-642-10520-3_9.
"""
from __future__ import annotations

import numpy as np

__all__ = ["SEQUENTIAL", "DIVERGING", "LEVELS", "INVALID", "WHITE", "BLACK", "INVALID_RGB", "LINE_COLOURS",
           "table", "palette", "to_indices", "symmetric_range", "hex_colour", "css_gradient"]

_SEQUENTIAL_HEX = (
    "00000401000501010601010802010a02020c02020e03021004031204031405041706041907051b08051d09061f0a0722"
    "0b07240c08260d08290e092b10092d110a30120a32140b34150b37160b39180c3c190c3e1b0c411c0c431e0c451f0c48"
    "210c4a230c4c240c4f260c51280b53290b552b0b572d0b592f0a5b310a5c320a5e340a5f3609613809623909633b0964"
    "3d09653e0966400a67420a68440a68450a69470b6a490b6a4a0c6b4c0c6b4d0d6c4f0d6c510e6c520e6d540f6d550f6d"
    "57106e59106e5a116e5c126e5d126e5f136e61136e62146e64156e65156e67166e69166e6a176e6c186e6d186e6f196e"
    "71196e721a6e741a6e751b6e771c6d781c6d7a1d6d7c1d6d7d1e6d7f1e6c801f6c82206c84206b85216b87216b88226a"
    "8a226a8c23698d23698f24699025689225689326679526679727669827669a28659b29649d29649f2a63a02a63a22b62"
    "a32c61a52c60a62d60a82e5fa92e5eab2f5ead305dae305cb0315bb1325ab3325ab43359b63458b73557b93556ba3655"
    "bc3754bd3853bf3952c03a51c13a50c33b4fc43c4ec63d4dc73e4cc83f4bca404acb4149cc4248ce4347cf4446d04545"
    "d24644d34743d44842d54a41d74b3fd84c3ed94d3dda4e3cdb503bdd513ade5238df5337e05536e15635e25734e35933"
    "e45a31e55c30e65d2fe75e2ee8602de9612bea632aeb6429eb6628ec6726ed6925ee6a24ef6c23ef6e21f06f20f1711f"
    "f1731df2741cf3761bf37819f47918f57b17f57d15f67e14f68013f78212f78410f8850ff8870ef8890cf98b0bf98c0a"
    "f98e09fa9008fa9207fa9407fb9606fb9706fb9906fb9b06fb9d07fc9f07fca108fca309fca50afca60cfca80dfcaa0f"
    "fcac11fcae12fcb014fcb216fcb418fbb61afbb81dfbba1ffbbc21fbbe23fac026fac228fac42afac62df9c72ff9c932"
    "f9cb35f8cd37f8cf3af7d13df7d340f6d543f6d746f5d949f5db4cf4dd4ff4df53f4e156f3e35af3e55df2e661f2e865"
    "f2ea69f1ec6df1ed71f1ef75f1f179f2f27df2f482f3f586f3f68af4f88ef5f992f6fa96f8fb9af9fc9dfafda1fcffa4"
)

_DIVERGING_HEX = (
    "3b4cc03c4ec23d50c33e51c53f53c64055c84257c94358cb445acc455cce465ecf485fd14961d24a63d34b64d54c66d6"
    "4e68d84f69d9506bda516ddb536edd5470de5572df5673e05875e15977e35a78e45b7ae55d7ce65e7de75f7fe86180e9"
    "6282ea6384eb6485ec6687ed6788ee688aef6a8bef6b8df06c8ff16e90f26f92f37093f37295f47396f57597f67699f6"
    "779af7799cf87a9df87b9ff97da0f97ea1fa80a3fa81a4fb82a6fb84a7fc85a8fc86a9fc88abfd89acfd8badfd8caffe"
    "8db0fe8fb1fe90b2fe92b4fe93b5fe94b6ff96b7ff97b8ff98b9ff9abbff9bbcff9dbdff9ebeff9fbfffa1c0ffa2c1ff"
    "a3c2fea5c3fea6c4fea7c5fea9c6fdaac7fdabc8fdadc9fdaec9fcafcafcb1cbfcb2ccfbb3cdfbb5cdfab6cefab7cff9"
    "b9d0f9bad0f8bbd1f8bcd2f7bed2f6bfd3f6c0d4f5c1d4f4c3d5f4c4d5f3c5d6f2c6d6f1c7d7f0c9d7f0cad8efcbd8ee"
    "ccd9edcdd9eccedaebcfdaead1dae9d2dbe8d3dbe7d4dbe6d5dbe5d6dce4d7dce3d8dce2d9dce1dadce0dbdcdedcdddd"
    "dddcdcdedcdbdfdbd9e0dbd8e1dad6e2dad5e3d9d3e4d9d2e5d8d1e6d7cfe7d7cee8d6cce9d5cbead5c9ead4c8ebd3c6"
    "ecd3c5edd2c3edd1c2eed0c0efcfbfefcebdf0cdbbf1cdbaf1ccb8f2cbb7f2cab5f2c9b4f3c8b2f3c7b1f4c6aff4c5ad"
    "f5c4acf5c2aaf5c1a9f5c0a7f6bfa6f6bea4f6bda2f7bca1f7ba9ff7b99ef7b89cf7b79bf7b599f7b497f7b396f7b194"
    "f7b093f7af91f7ad90f7ac8ef7aa8cf7a98bf7a889f7a688f6a586f6a385f6a283f5a081f59f80f59d7ef59c7df49a7b"
    "f4987af39778f39577f39475f29274f29072f18f71f18d6ff08b6ef08a6cef886bee8669ee8468ed8366ec8165ec7f63"
    "eb7d62ea7b60e97a5fe9785de8765ce7745be67259e57058e46e56e36c55e36b54e26952e16751e0654fdf634ede614d"
    "dd5f4bdc5d4ada5a49d95847d85646d75445d65244d55042d44e41d24b40d1493fd0473dcf453ccd423bcc403acb3e38"
    "ca3b37c83836c73635c53334c43032c32e31c12b30c0282fbe242ebd1f2dbb1b2cba162bb8122ab70d28b50927b40426"
)


def _decode(s):
    a = np.frombuffer(bytes.fromhex(s), np.uint8).reshape(256, 3)
    a.flags.writeable = False
    return a


SEQUENTIAL = _decode(_SEQUENTIAL_HEX)     #: (256, 3) uint8, cold to warm (inferno [1]_)
DIVERGING = _decode(_DIVERGING_HEX)       #: (256, 3) uint8, negative to positive (cool-warm [2]_)

LEVELS = 240                  #: palette entries of the colour scale, indices 0 .. LEVELS - 1
INVALID = LEVELS              #: index of a pixel without a valid value (NaN)
WHITE = LEVELS + 1            #: index of white (outlines)
BLACK = LEVELS + 2            #: index of black (outline halo)
INVALID_RGB = (140, 140, 140)

#: line colours for several series in one plot (own choice, dark enough on white)
LINE_COLOURS = ("#1f5a96", "#c2571a", "#2e8b57", "#8e3b8e", "#b8860b", "#4a4a4a", "#d0426b", "#3a9fb5")


def table(kind="sequential"):
    """The (256, 3) uint8 table ``"sequential"`` (temperature) or ``"diverging"`` (difference)."""
    try:
        return {"sequential": SEQUENTIAL, "diverging": DIVERGING}[kind]
    except KeyError:
        raise ValueError(f"colour table {kind!r}: expected 'sequential' or 'diverging'") from None


def palette(kind="sequential", levels=LEVELS):
    """(256, 3) uint8 palette of an indexed picture: the table resampled to ``levels``
    entries (entry k of the scale is table entry round(255 k / (levels - 1))), then
    ``INVALID`` grey, ``WHITE`` and ``BLACK`` at their fixed indices, black elsewhere."""
    if not 2 <= levels <= LEVELS:
        raise ValueError(f"levels must be in [2, {LEVELS}], got {levels}")
    t = table(kind)
    pal = np.zeros((256, 3), np.uint8)
    pal[:levels] = t[np.rint(np.linspace(0, 255, levels)).astype(int)]
    pal[INVALID] = INVALID_RGB
    pal[WHITE] = 255
    pal[BLACK] = 0
    return pal


def to_indices(image, lo, hi, levels=LEVELS):
    """Colour index of each pixel of a float image.

    Parameters
    ----------
    image : ndarray of float, any shape
        Values in the unit of ``lo`` and ``hi``; NaN (or inf) where there is no valid value.
    lo, hi : float
        The ends of the colour scale; values outside are clipped to its first/last step.
    levels : int
        Number of steps of the scale (at most ``LEVELS``). Value v goes to step
        ``floor((v - lo) / (hi - lo) * levels)``, clipped to [0, levels - 1]: every step
        covers an equal interval (hi - lo) / levels.

    Returns
    -------
    ndarray of uint8, the shape of ``image``
        Indices into :func:`palette`; ``INVALID`` where the value is not finite.
    """
    if not 2 <= levels <= LEVELS:
        raise ValueError(f"levels must be in [2, {LEVELS}], got {levels}")
    span = float(hi) - float(lo)
    if not span > 0:
        raise ValueError(f"colour scale needs lo < hi, got {lo!r}, {hi!r}")
    v = np.asarray(image, np.float32)
    ok = np.isfinite(v)
    x = np.where(ok, v, np.float32(lo)) - np.float32(lo)
    x *= np.float32(levels / span)
    np.clip(x, 0, levels - 1, out=x)
    idx = x.astype(np.uint8)
    idx[~ok] = INVALID
    return idx


def symmetric_range(image, floor=0.5):
    """(lo, hi) = (-m, m), m the largest finite magnitude of a difference image and at
    least ``floor``, so that zero sits at the centre of ``DIVERGING``."""
    v = np.asarray(image, float)
    v = v[np.isfinite(v)]
    m = max(float(np.abs(v).max()) if v.size else 0.0, floor)
    return -m, m


def hex_colour(value, lo, hi, kind="sequential"):
    """'#rrggbb' of the table entry for ``value`` on the scale lo..hi (clipped)."""
    t = table(kind)
    f = 0.0 if hi <= lo else min(max((float(value) - lo) / (hi - lo), 0.0), 1.0)
    r, g, b = t[int(round(f * 255))]
    return f"#{r:02x}{g:02x}{b:02x}"


def css_gradient(kind="sequential", stops=17, direction="to top"):
    """A CSS ``linear-gradient`` through ``stops`` evenly spaced entries of the table: a
    colour bar defined once per page, whatever the number of pictures on it."""
    t = table(kind)
    idx = np.rint(np.linspace(0, 255, stops)).astype(int)
    parts = [f"#{t[i][0]:02x}{t[i][1]:02x}{t[i][2]:02x} {100.0 * k / (stops - 1):.4g}%" for k, i in enumerate(idx)]
    return f"linear-gradient({direction}, {', '.join(parts)})"
