"""The colour ramp Favour gives its μ and favourability rasters, as a QGIS style file.

The style is written as ``<name>.qml`` beside each output (QGIS loads it by
default when the raster is opened), so command-line outputs look the same as
outputs loaded by a processing run. The ramp is Favour's own: slate for ground
the model gives nothing, through teal, sage and straw to rust for the most
favourable ground, legible in greyscale because lightness rises to straw.
"""

from __future__ import annotations

import os
from xml.sax.saxutils import quoteattr

#: (μ, colour) stops of the favourability ramp, μ in [0, 1].
RAMP = ((0.0, "#22304a"), (0.25, "#3f6e7e"), (0.5, "#8fae8b"), (0.75, "#e0c26b"),
        (1.0, "#c0522f"))

_TEMPLATE = """<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>
<qgis version="3.22.0" styleCategories="Symbology">
  <pipe>
    <rasterrenderer type="singlebandpseudocolor" band="1" opacity="1" alphaBand="-1"
                    classificationMin="{low}" classificationMax="{high}" nodataColor="">
      <minMaxOrigin>
        <limits>None</limits>
        <extent>WholeRaster</extent>
        <statAccuracy>Estimated</statAccuracy>
        <cumulativeCutLower>0.02</cumulativeCutLower>
        <cumulativeCutUpper>0.98</cumulativeCutUpper>
        <stdDevFactor>2</stdDevFactor>
      </minMaxOrigin>
      <rastershader>
        <colorrampshader colorRampType="INTERPOLATED" classificationMode="1" clip="0"
                         minimumValue="{low}" maximumValue="{high}" labelPrecision="2">
{items}
        </colorrampshader>
      </rastershader>
    </rasterrenderer>
    <brightnesscontrast brightness="0" contrast="0" gamma="1"/>
    <huesaturation saturation="0" grayscaleMode="0" colorizeOn="0" invertColors="0"
                   colorizeRed="255" colorizeGreen="128" colorizeBlue="128" colorizeStrength="100"/>
    <rasterresampler maxOversampling="2"/>
  </pipe>
  <blendMode>0</blendMode>
</qgis>
"""


def style_path(raster_path: str) -> str:
    """Return the style file QGIS looks for beside a raster: same name, ``.qml``."""
    return os.path.splitext(raster_path)[0] + ".qml"


def membership_style(low: float = 0.0, high: float = 1.0, title: str = "μ") -> str:
    """Return the QML text of the ramp stretched over ``[low, high]``."""
    items = []
    for fraction, colour in RAMP:
        value = low + (high - low) * fraction
        label = quoteattr(f"{value:.2f}" + (f" {title}" if fraction in (0.0, 1.0) else ""))
        items.append(f'          <item value="{value!r}" color="{colour}" alpha="255" label={label}/>')
    return _TEMPLATE.format(low=repr(low), high=repr(high), items="\n".join(items))
