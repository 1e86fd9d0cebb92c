"""Read OSM PBF (``.osm.pbf``) through pyosmium without a Python call per way or per node.

Why this design: iterating ways in Python costs a call per node reference (pyosmium's node lists are Python
sequences), which made reading a 6.6 M-node county take most of a minute. Here libosmium does the whole pass in C++
(node locations kept in its index, the ``highway`` key filter, and a writer) and emits the highway objects as OPL,
osmium's documented line format (one object per line, ``w<id> T<tags> N<ref>x<lon>y<lat>,...`` with locations on the
ways). :mod:`coverkit.network.osm_opl` turns that text into flat arrays (compiled kernels on the bytes).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from coverkit.errors import InputFileError
from coverkit.network.osm_opl import parse_highway_opl
from coverkit.network.osm_ways import OsmWays

#: Objects kept: roads and signals (``highway``), gates (``barrier``), turn restrictions (relations' ``type``).
OSM_KEYS = ("highway", "barrier", "type")
#: libosmium output options: OPL text, no version/user metadata, node locations written on the way nodes.
OPL_FORMAT = "opl,add_metadata=false,locations_on_ways=true"


def read_osm_pbf(path: str | Path) -> OsmWays:
    """Read highway ways, their node locations, traffic-signal and gate nodes and turn restrictions from a PBF file.

    Raises
    ------
    InputFileError
        The file is empty or is not an OSM file pyosmium can read.
    """
    path = Path(path)
    with tempfile.TemporaryDirectory(prefix="coverkit-osm-") as tmp:
        opl = Path(tmp) / "highways.opl"
        extract_highways(path, opl)
        text = opl.read_bytes()
    ways = parse_highway_opl(text)
    if len(ways.way_id) == 0:
        raise InputFileError(f"{path}: no OSM ways tagged highway found; is this the right OSM extract?")
    return ways


def extract_highways(path: Path, opl: Path) -> None:
    """Write the objects of ``path`` tagged with one of :data:`OSM_KEYS` to ``opl`` (OPL, node locations on ways)."""
    import osmium

    try:
        # the location handler sees every node (it comes before the filter); a way node missing from the file is
        # written without a location instead of failing the read
        locations = osmium.NodeLocationsForWays(osmium.index.create_map("flex_mem"))
        locations.ignore_errors()
        with osmium.SimpleWriter(osmium.io.File(str(opl), OPL_FORMAT)) as writer:
            osmium.apply(str(path), locations, osmium.filter.KeyFilter(*OSM_KEYS), writer)
    except RuntimeError as exc:
        raise InputFileError(
            f"{path}: not readable as OSM PBF ({str(exc)[:80]}); give an .osm.pbf, .osm or .osm.bz2 file."
        ) from None
