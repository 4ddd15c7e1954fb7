"""OpenAPI post-processing: an example for every query parameter, by parameter name.

drf-spectacular builds the parameters from the query serializers; this hook
adds the example a user of the trade would type, so the rendered docs show one
beside each description.
"""

from __future__ import annotations

from typing import Any

__all__ = ["DESCRIPTIONS", "EXAMPLES", "add_parameter_examples"]

# Descriptions for parameters whose serializer field or filter carries none.
DESCRIPTIONS: dict[str, str] = {
    "as_of": "ISO 8601 instant: answer from the store as it was then (uploads, retractions, "
    "supersessions and curated values)",
    "band": "band slug",
    "band__slug": "band slug",
    "bands": "comma list of band slugs (default: every band with points)",
    "bin": "bin width: 1d, 6h, 30min, 3600s, a number of days, or blocks (Bayesian blocks)",
    "deredden": "correct for Galactic extinction with the source's E(B-V)",
    "format": "rendering: json, csv, ecsv, votable (and png, svg where plots exist)",
    "instrument": "instrument slug",
    "min_pairs": "ZDCF: pairs per equal-population lag bin (Alexander 1997: at least 11)",
    "n_boot": "bootstrap resamples of the pairs for the slope errors",
    "p0": "Bayesian blocks false-alarm probability (Scargle et al. 2013)",
    "psd_slope": "power-spectrum slope beta of the red-noise simulations (default: estimated)",
    "r_v": "ratio of total to selective extinction R_V (3.1 by convention)",
    "seed": "seed of the random generator (answers are reproducible)",
    "slug": "source, instrument or band slug",
    "source": "source slug",
    "source__slug": "source slug",
    "uploader": "user name of the uploader",
}

EXAMPLES: dict[str, Any] = {
    "bands": "R,gamma-100mev-300gev",
    "instruments": "velmora-13,oruna-20",
    "unit": "mJy",
    "bin": "1d",
    "origin": 0.0,
    "p0": 0.05,
    "start": 59600.0,
    "end": 59700.0,
    "time_format": "mjd",
    "upper_limits": "include",
    "deredden": False,
    "extinction_law": "ccm89",
    "r_v": 3.1,
    "host": False,
    "as_of": "2026-05-01T00:00:00Z",
    "format": "csv",
    "x": "R",
    "y": "gamma-100mev-300gev",
    "max_separation": 0.5,
    "n_boot": 1000,
    "seed": 0,
    "method": "iccf",
    "lag_min": -30.0,
    "lag_max": 30.0,
    "lag_step": 1.0,
    "local": False,
    "min_pairs": 11,
    "n_sim": 100,
    "n_sig": 100,
    "psd_slope": 2.0,
    "at": 59985.0,
    "window": 3.0,
    "q": "J0412",
    "ra": 63.04,
    "dec": 22.56,
    "radius": 1.0,
    "page": 1,
    "page_size": 100,
    "source": "lbmc-0412",
    "band": "R",
    "instrument": "velmora-13",
    "uploader": "ilundqvar",
    "status": "accepted",
    "kind": "flux_density",
    "mag_system": "Vega",
    "slug": "lbmc-0412",
    "id": 1,
    "source__slug": "lbmc-0412",
    "band__slug": "R",
}


def add_parameter_examples(
    result: dict[str, Any], generator: Any, request: Any, public: bool
) -> dict[str, Any]:
    for path_item in result.get("paths", {}).values():
        for operation in path_item.values():
            if not isinstance(operation, dict):
                continue
            for param in operation.get("parameters", []):
                name = param.get("name")
                if name in DESCRIPTIONS and not param.get("description"):
                    param["description"] = DESCRIPTIONS[name]
                if name in EXAMPLES and "example" not in param and "examples" not in param:
                    example = EXAMPLES[name]
                    schema = param.get("schema", {})
                    enum = schema.get("enum")
                    if enum and example not in enum:
                        example = enum[0]
                    if schema.get("type") == "integer" and not isinstance(example, int):
                        continue
                    param["example"] = example
    return result
