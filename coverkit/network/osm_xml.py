"""Read OSM XML (``.osm``, ``.osm.bz2``, ``.osm.gz``) through osmnx's XML parser."""

from __future__ import annotations

import warnings
from pathlib import Path
from xml.etree.ElementTree import ParseError
from xml.sax import SAXParseException

import numpy as np

from coverkit.errors import InputFileError
from coverkit.network.osm_restrictions import GATE_BARRIERS, restrictions_frame
from coverkit.network.osm_ways import OsmWays, gates_frame, tags_frame


def read_osm_xml(path: str | Path) -> OsmWays:
    """Read highway ways and their nodes from an OSM XML file.

    osmnx parses the file (plain, bz2 or gzip) into Overpass-style elements; only ways with a ``highway`` tag are
    kept, nodes tagged ``highway=traffic_signals`` are recorded as signals, gate nodes (``barrier=gate`` and the
    like) with their access tags, and ``type=restriction`` relations as turn restrictions.

    Raises
    ------
    InputFileError
        The file is empty or is not OSM XML.
    """
    from osmnx import _osm_xml  # osmnx's reader; pinned to osmnx 2.x in pyproject

    path = Path(path)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            data = _osm_xml._overpass_json_from_xml(path, "utf-8")
    except (
        SAXParseException,
        ParseError,
        OSError,
        EOFError,
        ValueError,
        UnicodeDecodeError,
    ) as exc:
        raise InputFileError(
            f"{path}: not readable as OSM XML ({type(exc).__name__}: {str(exc)[:80]}); "
            "give an .osm/.osm.bz2 export or an .osm.pbf file."
        ) from None
    elements = data.get("elements", []) if isinstance(data, dict) else []
    node_els = [e for e in elements if e.get("type") == "node" and "lat" in e and "lon" in e]
    way_els = [e for e in elements if e.get("type") == "way" and "highway" in e.get("tags", {})]
    if not node_els and not way_els:
        raise InputFileError(f"{path}: no OSM nodes or ways found; is this an OSM XML file?")
    node_id = np.array([int(e["id"]) for e in node_els], dtype=np.int64)
    lon = np.array([float(e["lon"]) for e in node_els])
    lat = np.array([float(e["lat"]) for e in node_els])
    order = np.argsort(node_id, kind="stable")
    signal_ids = np.array(
        sorted(int(e["id"]) for e in node_els if e.get("tags", {}).get("highway") == "traffic_signals"),
        dtype=np.int64,
    )
    gate_els = [e for e in node_els if e.get("tags", {}).get("barrier") in GATE_BARRIERS]
    rel_els = [e for e in elements if e.get("type") == "relation" and e.get("tags", {}).get("type") == "restriction"]
    way_els.sort(key=lambda e: int(e["id"]))
    refs_list = [np.asarray(e.get("nodes", []), dtype=np.int64) for e in way_els]
    lengths = np.array([len(r) for r in refs_list], dtype=np.int64)
    return OsmWays(
        way_id=np.array([int(e["id"]) for e in way_els], dtype=np.int64),
        tags=tags_frame([e.get("tags", {}) for e in way_els]),
        refs=np.concatenate(refs_list) if refs_list else np.zeros(0, np.int64),
        offsets=np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64),
        node_id=node_id[order],
        lon=lon[order],
        lat=lat[order],
        signal_ids=signal_ids,
        restrictions=restrictions_frame(rel_els),
        gates=gates_frame([int(e["id"]) for e in gate_els], [e["tags"] for e in gate_els]),
    )
