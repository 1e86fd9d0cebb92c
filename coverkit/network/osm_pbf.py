"""Read OSM PBF (``.osm.pbf``) through pyosmium, keeping only arrays.

pyosmium's C++ key filter passes only objects tagged ``highway`` to Python, and its node-location cache (in C++)
gives the coordinates of way nodes; no Python object per node of the file is kept.
"""

from __future__ import annotations

from array import array
from pathlib import Path

import numpy as np

from coverkit.errors import InputFileError
from coverkit.network.osm_ways import WAY_TAGS, OsmWays, tags_frame


def read_osm_pbf(path: str | Path) -> OsmWays:
    """Read highway ways, their node locations and traffic-signal nodes from an OSM PBF file.

    Raises
    ------
    InputFileError
        The file is empty or is not an OSM file pyosmium can read.
    """
    import osmium

    path = Path(path)
    way_ids = array("q")
    refs = array("q")
    lengths = array("q")
    ref_lon = array("d")
    ref_lat = array("d")
    signal_ids = array("q")
    tag_rows: list[dict] = []
    try:
        processor = (
            osmium.FileProcessor(str(path), osmium.osm.NODE | osmium.osm.WAY)
            .with_locations()
            .with_filter(osmium.filter.KeyFilter("highway"))
        )
        for obj in processor:
            if obj.is_node():
                if obj.tags.get("highway") == "traffic_signals":
                    signal_ids.append(obj.id)
                continue
            count = 0
            for nd in obj.nodes:
                loc = nd.location
                if loc.valid():
                    refs.append(nd.ref)
                    ref_lon.append(loc.lon)
                    ref_lat.append(loc.lat)
                    count += 1
            way_ids.append(obj.id)
            lengths.append(count)
            tags = obj.tags
            tag_rows.append({k: tags.get(k) for k in WAY_TAGS})
    except RuntimeError as exc:
        raise InputFileError(
            f"{path}: not readable as OSM PBF ({str(exc)[:80]}); give an .osm.pbf, .osm or .osm.bz2 file."
        ) from None
    if not way_ids:
        raise InputFileError(f"{path}: no OSM ways tagged highway found; is this the right OSM extract?")
    refs_np = np.frombuffer(refs, dtype=np.int64).copy()
    node_id, first = np.unique(refs_np, return_index=True)
    way_np = np.frombuffer(way_ids, dtype=np.int64).copy()
    order = np.argsort(way_np, kind="stable")
    lengths_np = np.frombuffer(lengths, dtype=np.int64)
    offsets = np.concatenate([[0], np.cumsum(lengths_np)])
    if not np.all(order == np.arange(len(order))):
        # PBF files are sorted by id by convention; reorder if one is not, to keep the output deterministic
        pieces = [refs_np[offsets[i] : offsets[i + 1]] for i in order]
        refs_np = np.concatenate(pieces)
        lengths_np = lengths_np[order]
        offsets = np.concatenate([[0], np.cumsum(lengths_np)])
        tag_rows = [tag_rows[i] for i in order]
        way_np = way_np[order]
    lon = np.frombuffer(ref_lon, dtype=float)[first]
    lat = np.frombuffer(ref_lat, dtype=float)[first]
    return OsmWays(
        way_id=way_np,
        tags=tags_frame(tag_rows),
        refs=refs_np,
        offsets=offsets.astype(np.int64),
        node_id=node_id,
        lon=lon,
        lat=lat,
        signal_ids=np.unique(np.frombuffer(signal_ids, dtype=np.int64)),
    )
