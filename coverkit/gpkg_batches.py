"""Write a big layer to a GeoPackage as a stream of Arrow batches.

Why: handing GDAL one feature object at a time (pyogrio's default path) costs about 8 us a feature, so a 3.8 M-edge
network took 30 s; GDAL's Arrow stream interface takes whole columns. Converting the whole table at once would
also hold a second copy of every column plus the WKB of every line, so the rows go over in batches of
:data:`BATCH_ROWS`, each built only when GDAL asks for it: the extra memory is one batch, not one table. The rows
come from a GeoDataFrame or from flat arrays (a network held as its columnar layout), through one
:class:`LayerRows`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import shapely
from pyproj import CRS

#: Rows per Arrow batch: large enough that per-batch overhead vanishes, small enough to keep the copy modest.
BATCH_ROWS = 250_000


@dataclass(frozen=True)
class LayerRows:
    """A layer to write: its length, its attribute rows and geometries by row range, one geometry type, a CRS."""

    length: int
    attributes: Callable[[int, int], pd.DataFrame]  # rows start:stop, attribute columns in layer order
    geometry: Callable[[int, int], np.ndarray]  # shapely geometries of rows start:stop
    geometry_type: str  # OGR name, e.g. "LineString"
    crs: CRS | None


def frame_rows(gdf) -> LayerRows:
    """:class:`LayerRows` of a GeoDataFrame (one geometry type)."""
    geom_name = gdf.geometry.name
    columns = [c for c in gdf.columns if c != geom_name]
    geoms = gdf.geometry.to_numpy()
    kinds = np.unique(shapely.get_type_id(geoms))
    if len(kinds) > 1:
        raise ValueError(f"one geometry type expected, found type ids {kinds.tolist()}")
    return LayerRows(
        length=len(gdf),
        attributes=lambda start, stop: gdf.iloc[start:stop][columns],
        geometry=lambda start, stop: geoms[start:stop],
        geometry_type=_TYPE_NAMES[int(kinds[0])] if len(kinds) else "Unknown",
        crs=gdf.crs,
    )


def write_layer(rows: LayerRows, path: str | Path, *, layer: str, append: bool = False) -> None:
    """Write ``rows`` as ``layer`` (geometry column ``geometry``) of the GeoPackage ``path``, in Arrow batches.

    The layer has the schema, CRS and spatial index ``pyogrio.write_dataframe(gdf, path, layer=layer,
    driver="GPKG")`` gives for the same rows, and reads back equal to it.
    """
    import pyarrow as pa

    # the field types come from the first batch; a text column with no value in it (all NULL) is text, as pyogrio
    # makes it, not Arrow's null type, which GDAL refuses
    first = pa.Table.from_pandas(rows.attributes(0, min(BATCH_ROWS, rows.length)), preserve_index=False).schema
    head = pa.schema([f.with_type(pa.string()) if pa.types.is_null(f.type) else f for f in first])
    geom_field = pa.field("geometry", pa.binary(), metadata={"ARROW:extension:name": "geoarrow.wkb"})
    schema = head.append(geom_field)

    def batches() -> Iterator[pa.RecordBatch]:
        for start in range(0, rows.length, BATCH_ROWS):
            stop = min(start + BATCH_ROWS, rows.length)
            table = pa.Table.from_pandas(rows.attributes(start, stop), schema=head, preserve_index=False)
            wkb = pa.array(shapely.to_wkb(rows.geometry(start, stop)), type=pa.binary())
            yield from table.append_column(geom_field, wkb).to_batches()

    crs = rows.crs
    epsg = crs.to_epsg() if crs is not None else None
    pyogrio.write_arrow(
        pa.RecordBatchReader.from_batches(schema, batches()),
        path,
        layer=layer,
        driver="GPKG",
        geometry_name="geometry",
        geometry_type=rows.geometry_type,
        crs=f"EPSG:{epsg}" if epsg else (crs.to_wkt("WKT1_GDAL") if crs is not None else None),
        append=append,
    )


#: GEOS type ids (``shapely.get_type_id``) to the OGR geometry type names GDAL takes.
_TYPE_NAMES = {
    0: "Point",
    1: "LineString",
    3: "Polygon",
    4: "MultiPoint",
    5: "MultiLineString",
    6: "MultiPolygon",
    7: "GeometryCollection",
}
