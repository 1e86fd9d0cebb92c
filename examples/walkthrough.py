"""A walk through coverkit's Python API on the fictional demo county (run from the repository root).

Every figure it prints is a planning estimate for an invented county; nothing here is for live dispatch.
"""

from pathlib import Path

from coverkit import CAUTION
from coverkit.coverage import Standard, area_layers, compliance_by, evaluate_coverage, per_base
from coverkit.demand import load_demand
from coverkit.isochrones import drive_time_polygons, summary_table
from coverkit.network import build_network
from coverkit.travel import read_points

DEMO = Path(__file__).resolve().parents[1] / "data" / "demo"

# 1. Road network from the OSM file, clipped to the county plus 3 km, with emergency speeds.
net, report = build_network(DEMO / "varrowby.osm.bz2", "emergency", boundary=DEMO / "boundary.geojson")
print(report.summary_text())

# 2. Bases and drive-time polygons (GeoDataFrames, in the network's UTM CRS).
bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
polygons = drive_time_polygons(net, bases, [4, 8, 12])
print(summary_table(polygons).to_string(index=False))

# 3. Residents and calls against an 8-minute ALS standard with 60 s turnout, 90 % of demand.
standard = Standard("ALS 8 min", travel_s=480, turnout_s=60, fractile=0.9, source="NFPA 1710")
residents = evaluate_coverage(net, bases, load_demand(DEMO / "population.tif", net), standard)
calls = evaluate_coverage(net, bases, load_demand(DEMO / "incidents.csv", net, where="priority <= 2"), standard)
for name, result in (("residents", residents), ("priority 1-2 calls", calls)):
    s = result.summary()
    print(f"{name}: {s['covered_share']:.1%} covered, {s['fractile_response_s'] / 60:.1f} min at the 90th percentile")

# 4. Where the gaps are, who is first due, and compliance by priority.
areas = area_layers(net, residents, incidents=calls.demand)
print(areas.gaps[["gap_id", "population", "incidents", "area_km2"]].head().to_string(index=False))
print(per_base(residents).to_string(index=False))
print(compliance_by(calls, "priority").to_string(index=False))
print(CAUTION)
