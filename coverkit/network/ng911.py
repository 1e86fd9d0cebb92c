"""The NENA NG9-1-1 GIS data model's road centerline fields, as a ready-made centerline field mapping.

Source: NENA Standard for NG9-1-1 GIS Data Model, NENA-STA-006 (the 2018 edition is NENA-STA-006.1-2018), the
Road Centerline layer. The standard's title and number are confirmed; the field names, the one-way values and the
road class values below are written **from memory** of that standard and have not been checked against its text
here (check them against your state's NG9-1-1 profile before relying on them):

- ``RoadClass``: the road class, a registry value (``Primary``, ``Secondary``, ``Local``, ``Ramp``, ...), whose
  meanings follow the US Census Bureau's MAF/TIGER Feature Class Codes (S1100 primary road, S1200 secondary road,
  S1400 local road, S1630 ramp, ...; also from memory).
- ``SpeedLimit``: the posted speed limit, miles per hour (a US standard; from memory).
- ``OneWay``: ``B`` both directions, ``FT`` one way from the from-node to the to-node (the digitised direction),
  ``TF`` one way from the to-node to the from-node.
- ``RCL_NGUID``: the feature's unique id (a text id; not mapped, since the network's ``source_id`` is a number).
- ``St_Name``: the street name element (the full name is split into several elements, so none is mapped: add
  ``name=<field>`` after the preset for names in the summary).

Which NENA class goes to which of coverkit's classes is our own mapping (no source), chosen from the MTFCC meanings:
see :data:`NG911_CLASSES`. This module is the one home of these facts; the README's table is printed from it
(``python -m coverkit.network.ng911``).
"""

from __future__ import annotations

#: Name of the preset in a field mapping (``fields="ng911"``).
PRESET = "ng911"

#: NENA road centerline field behind each mapping key (names from memory of NENA-STA-006).
NG911_FIELDS: dict[str, str] = {"class": "RoadClass", "speed": "SpeedLimit", "oneway": "OneWay"}

#: NENA ``SpeedLimit`` unit: miles per hour (from memory).
NG911_SPEED_UNIT = "mph"

#: NENA ``OneWay`` values (from memory): from-to runs with the digitised direction, to-from against it, ``B`` both.
NG911_ONEWAY_FORWARD = ("FT",)
NG911_ONEWAY_BACKWARD = ("TF",)
NG911_ONEWAY_BOTH = ("B",)

#: NENA ``RoadClass`` value -> coverkit class (values from memory of the standard; the mapping is ours). Classes
#: that are not for motor vehicles go to ``path`` or ``track``, which no profile drives (they are left out).
NG911_CLASSES: dict[str, str] = {
    "Primary": "motorway",  # MTFCC S1100: divided, limited-access highways with interchanges
    "Secondary": "primary",  # S1200: main arteries (US, state, county highways), at-grade intersections
    "Local": "residential",  # S1400: local neighbourhood roads, rural roads, city streets
    "Ramp": "motorway_link",  # S1630: ramps onto limited-access highways
    "Service Drive": "unclassified",  # S1640: service drives along limited-access highways (frontage roads)
    "Alley": "service",  # S1730
    "Private": "service",  # S1740: private roads for service vehicles
    "Parking Lot": "service",  # S1780: parking lot roads
    "Vehicular Trail": "track",  # S1500: four-wheel-drive trails, left out
    "Walkway": "path",  # S1710
    "Stairway": "path",  # S1720
    "Trail": "path",  # S1820 bike path or trail
    "Bridle Path": "path",  # S1830
}


def ng911_fields() -> dict[str, str]:
    """The NG9-1-1 preset as a field mapping (the same keys :func:`coverkit.network.centerlines.parse_fields` gives).

    >>> f = ng911_fields()
    >>> f["class"], f["speed"], f["speed_unit"], f["oneway_forward"], f["oneway_backward"]
    ('RoadClass', 'SpeedLimit', 'mph', 'FT', 'TF')
    >>> "Primary:motorway" in f["class_map"].split(";")
    True
    """
    return {
        **NG911_FIELDS,
        "speed_unit": NG911_SPEED_UNIT,
        "oneway_forward": ";".join(NG911_ONEWAY_FORWARD),
        "oneway_backward": ";".join(NG911_ONEWAY_BACKWARD),
        "class_map": ";".join(f"{value}:{cls}" for value, cls in NG911_CLASSES.items()),
    }


def readme_table() -> str:
    """The README's table of which NENA field and value went where (Markdown)."""
    lines = ["| NENA NG9-1-1 field | value | coverkit |", "| --- | --- | --- |"]
    lines.append(f"| `{NG911_FIELDS['speed']}` | number | posted speed, {NG911_SPEED_UNIT} |")
    lines.append(f"| `{NG911_FIELDS['oneway']}` | `{NG911_ONEWAY_BOTH[0]}` | both directions |")
    lines.append(f"| `{NG911_FIELDS['oneway']}` | `{NG911_ONEWAY_FORWARD[0]}` | one way, digitised direction |")
    lines.append(f"| `{NG911_FIELDS['oneway']}` | `{NG911_ONEWAY_BACKWARD[0]}` | one way, against it |")
    for value, cls in NG911_CLASSES.items():
        shown = f"`{cls}`" if cls not in ("path", "track") else f"left out (`{cls}`)"
        lines.append(f"| `{NG911_FIELDS['class']}` | `{value}` | {shown} |")
    return "\n".join(lines)


if __name__ == "__main__":
    print(readme_table())
