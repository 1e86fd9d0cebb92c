"""OSM turn restrictions (``type=restriction`` relations) and gates, from the readers to the built network's edges.

A relation names a ``from`` way, a ``via`` node (or one ``via`` way) and a ``to`` way; ``no_*`` forbids that turn,
``only_*`` forbids every other turn out of the via (OSM wiki, relation:restriction). Once the network's edges are
numbered, each relation becomes rows of banned edge sequences: ``from_edge -> to_edge`` through the via node, or
``from_edge -> via_edge -> to_edge`` through a via way. Relations that do not match the kept edges (clipped away,
ways not drivable, a via way that is not one edge) are counted and left out.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Columns of the restrictions as read (one row per relation).
READ_COLUMNS = ("relation_id", "restriction", "from_way", "via_node", "via_way", "to_way", "via_ways", "exempt")
#: Columns of the stored bans (one row per banned edge sequence; ``via_edge`` is -1 for a via node).
BAN_COLUMNS = ("relation_id", "restriction", "from_edge", "via_edge", "to_edge")
#: Restriction tags read, the general one first (OSM wiki: ``restriction:<transport mode>`` refines it).
RESTRICTION_TAGS = ("restriction", "restriction:motorcar", "restriction:motor_vehicle")
#: ``barrier`` values read as gates (OSM wiki, key:barrier).
GATE_BARRIERS = frozenset({"gate", "lift_gate", "swing_gate", "sliding_gate"})


def restrictions_frame(relations: list[dict]) -> pd.DataFrame:
    """Turn restrictions from relation dicts ``{"id", "tags", "members": [{"type", "ref", "role"}]}``.

    Only ``type=restriction`` relations with a ``no_*`` or ``only_*`` value are kept; ``via_node``/``via_way`` is -1
    where absent, ``via_ways`` counts the via ways (only one is usable) and ``exempt`` is the ``except`` tag (the
    vehicle types the restriction does not bind, ``;``-separated).

    Examples
    --------
    >>> rel = {"id": 5, "tags": {"type": "restriction", "restriction": "no_left_turn"},
    ...        "members": [{"type": "way", "ref": 1, "role": "from"}, {"type": "node", "ref": 9, "role": "via"},
    ...                    {"type": "way", "ref": 2, "role": "to"}]}
    >>> restrictions_frame([rel]).loc[0, ["from_way", "via_node", "to_way"]].astype(int).tolist()
    [1, 9, 2]
    """
    rows = []
    for rel in relations:
        tags = rel.get("tags", {})
        if tags.get("type") != "restriction":
            continue
        value = next((tags[k] for k in RESTRICTION_TAGS if k in tags), "")
        if not (value.startswith("no_") or value.startswith("only_")):
            continue
        first = {"from": -1, "to": -1, "via_node": -1, "via_way": -1}
        via_ways = 0
        for m in rel.get("members", []):
            role, kind, ref = m.get("role"), m.get("type"), int(m.get("ref", -1))
            if role in ("from", "to") and kind == "way" and first[role] < 0:
                first[role] = ref
            elif role == "via" and kind == "node":
                first["via_node"] = ref
            elif role == "via" and kind == "way":
                via_ways += 1
                first["via_way"] = ref if first["via_way"] < 0 else first["via_way"]
        exempt = str(tags.get("except", ""))
        rows.append(
            (int(rel["id"]), value, first["from"], first["via_node"], first["via_way"], first["to"], via_ways, exempt)
        )
    frame = pd.DataFrame(rows, columns=list(READ_COLUMNS))
    text = ("restriction", "exempt")
    return frame.astype({c: np.int64 for c in READ_COLUMNS if c not in text}).astype(dict.fromkeys(text, object))


def empty_bans() -> pd.DataFrame:
    """A bans table with no rows."""
    return pd.DataFrame(
        {
            "relation_id": np.zeros(0, np.int64),
            "restriction": np.zeros(0, object),
            "from_edge": np.zeros(0, np.int64),
            "via_edge": np.zeros(0, np.int64),
            "to_edge": np.zeros(0, np.int64),
        }
    )


def resolve_bans(
    read: pd.DataFrame, *, u: np.ndarray, v: np.ndarray, way: np.ndarray, node_id: np.ndarray, vehicle: str = ""
) -> tuple[pd.DataFrame, dict[str, int]]:
    """Banned edge sequences of the restrictions ``read`` on edges ``u -> v`` (node indices) of OSM way ``way``.

    ``node_id`` gives the OSM id of each node index; restrictions whose ``except`` tag names ``vehicle`` (the
    profile's most specific access key, e.g. ``emergency``) do not bind it and are left out. A via-node
    restriction matches the edges of the from way that end at the via node and the edges of the to way that start
    there; a via-way one matches a via edge of that way joining the two. ``only_*`` bans every other edge leaving
    the via (or leaving the via edge's end).

    Returns
    -------
    bans, counts
        The bans (:data:`BAN_COLUMNS`, sorted) and counts of relations read, used and not matched.
    """
    n_read = len(read)
    counts = {"restrictions_read": n_read, "restrictions_used": 0, "restrictions_unmatched": 0}
    if n_read and vehicle and "exempt" in read.columns:
        exempt = (
            read["exempt"].fillna("").astype(str).str.split(";").apply(lambda xs: vehicle in [x.strip() for x in xs])
        )
        counts["restrictions_exempt"] = int(exempt.sum())
        read = read[~exempt.to_numpy(dtype=bool)]
    if len(read) == 0 or len(u) == 0:
        counts["restrictions_unmatched"] = len(read)
        return empty_bans(), counts
    osm_u, osm_v = node_id[u], node_id[v]
    edges = pd.DataFrame({"edge": np.arange(len(u)), "way": way, "ou": osm_u, "ov": osm_v, "v": v})
    rel = read[read["via_ways"] <= 1].reset_index(drop=True)
    rel = rel.assign(r=np.arange(len(rel)))
    # via node: from edges end at the via, to edges start there
    node_rel = rel[(rel["via_node"] >= 0) & (rel["via_way"] < 0)]
    frm = node_rel.merge(edges, left_on=["from_way", "via_node"], right_on=["way", "ov"])[["r", "edge", "v"]]
    to = node_rel.merge(edges, left_on=["to_way", "via_node"], right_on=["way", "ou"])[["r", "edge"]]
    pairs = frm.rename(columns={"edge": "from_edge", "v": "at"}).merge(to.rename(columns={"edge": "to_edge"}), on="r")
    pairs["via_edge"] = -1
    # via way (one edge): from edge ends where the via edge starts, to edge starts where it ends
    way_rel = rel[rel["via_way"] >= 0]
    via = way_rel.merge(edges, left_on="via_way", right_on="way")[["r", "edge", "ou", "ov", "v", "from_way", "to_way"]]
    via = via.rename(columns={"edge": "via_edge"})
    vf = via.merge(
        edges[["edge", "way", "ov"]], left_on=["from_way", "ou"], right_on=["way", "ov"], suffixes=("", "_f")
    )
    vf = vf.rename(columns={"edge": "from_edge"})[["r", "via_edge", "from_edge", "ov", "v", "to_way"]]
    vt = vf.merge(edges[["edge", "way", "ou"]], left_on=["to_way", "ov"], right_on=["way", "ou"])
    vt = vt.rename(columns={"edge": "to_edge", "v": "at"})[["r", "from_edge", "via_edge", "to_edge", "at"]]
    cols = ["r", "from_edge", "via_edge", "to_edge", "at"]
    matched = pd.concat([pairs[cols], vt[cols]], ignore_index=True)
    matched = matched.merge(rel[["r", "relation_id", "restriction"]], on="r")
    only = matched["restriction"].astype(str).str.startswith("only_").to_numpy()
    bans = [matched.loc[~only, ["relation_id", "restriction", "from_edge", "via_edge", "to_edge"]]]
    if only.any():
        # every edge leaving the junction other than the allowed ones (a U-turn back included)
        leave = pd.DataFrame({"at": u, "to_edge": np.arange(len(u))})
        allowed = matched.loc[only].drop_duplicates(["r", "from_edge", "via_edge", "to_edge"])
        keys = allowed[["r", "from_edge", "via_edge", "at", "relation_id", "restriction"]].drop_duplicates()
        others = keys.merge(leave, on="at")
        ok = allowed[["r", "from_edge", "via_edge", "to_edge"]].assign(ok=True)
        others = others.merge(ok, on=["r", "from_edge", "via_edge", "to_edge"], how="left")
        others = others[others["ok"].isna()]
        bans.append(others[["relation_id", "restriction", "from_edge", "via_edge", "to_edge"]])
    out = pd.concat(bans, ignore_index=True).astype(
        {"relation_id": np.int64, "from_edge": np.int64, "via_edge": np.int64, "to_edge": np.int64}
    )
    out = out.drop_duplicates(["from_edge", "via_edge", "to_edge"])
    out = out.sort_values(["from_edge", "via_edge", "to_edge", "relation_id"], kind="stable").reset_index(drop=True)
    used = int(matched["r"].nunique())
    counts["restrictions_used"] = used
    counts["restrictions_unmatched"] = n_read - used - counts.get("restrictions_exempt", 0)
    return out, counts
