"""Vehicle identity of every row.

Order, first that is present wins (per row, so an empty ID cell falls back):

1. a vehicle-ID column (``Vehicle ID``, ``unit id``, ``asset id`` ...);
2. a ``# vehicle: <id>`` metadata line;
3. a VIN column;
4. a ``# vin: <VIN>`` metadata line;
5. the name of the folder holding the file.

A VIN (3 or 4) that the vehicle registry lists becomes that registry row's
vehicle_id, so a workshop tool's VIN-only export joins the fleet's own ids;
an unlisted VIN is itself the id.

Every VIN seen is checked (ISO 3779 check digit via tracktrue.vin); a bad
one is reported as a warning and still used as given. A vehicle ID is data:
it never becomes part of a path (sample partitions use
tracktrue.ids.vehicle_bucket, an integer).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ingest.reader import FileUnusable, clean_text
from tracktrue.vin import vin_problem


@dataclass(frozen=True)
class Identity:
    codes: np.ndarray  # int per row, index into ids
    ids: list[str]
    vins: dict[str, str]  # vehicle id -> first VIN seen for it
    warnings: list[str]


def resolve_identity(n_rows: int, id_col: pa.Array | None, vin_col: pa.Array | None,
                     metadata: dict[str, str], folder_name: str, registry_vins: dict[str, str]) -> Identity:
    """Vehicle id per row following the documented order."""
    meta_vehicle = (metadata.get("vehicle") or metadata.get("vehicle id") or "").strip() or None
    meta_vin = (metadata.get("vin") or "").strip() or None
    ids = clean_text(id_col) if id_col is not None else None
    vins = clean_text(vin_col) if vin_col is not None else None
    layers: list[pa.Array | pa.Scalar] = [a for a in (ids,) if a is not None]
    if meta_vehicle is not None:
        layers.append(pa.scalar(meta_vehicle, pa.string()))
    if vins is not None:
        layers.append(vins)
    for value in (meta_vin, folder_name.strip() or None):
        if value is not None:
            layers.append(pa.scalar(value, pa.string()))
    if not layers:
        raise FileUnusable("no vehicle identity (no ID or VIN column, no # vehicle: line, no folder name)")
    vehicle = pc.coalesce(*layers) if len(layers) > 1 else layers[0]
    if isinstance(vehicle, pa.Scalar):
        vehicle = pa.repeat(vehicle, n_rows)
    encoded = pc.fill_null(vehicle, "").dictionary_encode()
    codes = encoded.indices.to_numpy(zero_copy_only=False).astype(np.int64)
    id_list = encoded.dictionary.to_pylist()
    vin_of = _vins_by_vehicle(codes, id_list, vins, meta_vin)
    if registry_vins:
        vin_values = set(vin_of.values())
        mapped = [registry_vins.get(v.upper(), v) if v in vin_values else v for v in id_list]
        id_list, inverse = np.unique(np.array(mapped, dtype=object), return_inverse=True)
        codes, id_list = inverse[codes], id_list.tolist()
        vin_of = {registry_vins.get(v.upper(), k) if k in vin_values else k: v for k, v in vin_of.items()}
    warnings = [p for v in sorted(set(vin_of.values())) if (p := vin_problem(v))]
    return Identity(codes, id_list, vin_of, warnings)


def _vins_by_vehicle(codes, id_list, vins: pa.Array | None, meta_vin: str | None) -> dict[str, str]:
    out: dict[str, str] = {}
    if vins is not None and len(codes):
        present = ~vins.is_null().to_numpy(zero_copy_only=False)
        if present.any():
            rows = np.flatnonzero(present)
            first_code, first_row = np.unique(codes[rows], return_index=True)
            values = vins.take(pa.array(rows[first_row])).to_pylist()
            out.update({id_list[c]: v for c, v in zip(first_code, values)})
    if meta_vin is not None:
        for vid in id_list:
            out.setdefault(vid, meta_vin)
    return out
