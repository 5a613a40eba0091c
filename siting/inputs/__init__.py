"""Reading a district's input layers, split by concern.

==================  ======================================================================================
module              owns
==================  ======================================================================================
``vector``          reading one vector layer (OGR formats, GeoParquet, ``.osm.pbf``), input file hashes
``crs``             the job's projected CRS, the local UTM zone, reprojection, longitude/latitude checks
``heights``         building heights from a column, the ``height`` tag, ``building:levels`` or the default
``layers``          checks of each layer: footprints, base stations, given sites and users, the area
==================  ======================================================================================

:func:`siting.district.load_district` puts them together; ``siting.district`` re-exports the public names.
"""

from .crs import to_lonlat
from .heights import FT_M, MAX_HEIGHT_M, parse_height_m
from .layers import MIN_PART_AREA_M2
from .vector import read_layer

__all__ = ["FT_M", "MAX_HEIGHT_M", "MIN_PART_AREA_M2", "parse_height_m", "read_layer", "to_lonlat"]
