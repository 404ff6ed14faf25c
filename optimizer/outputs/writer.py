"""Everything ``stagefit design`` writes for a builder, in one folder."""

from __future__ import annotations

import json

from ..circuit.spice import to_spice
from .designfile_out import design_yaml

__all__ = ["write_outputs"]


def write_outputs(out, spec, result, data: dict, rated: dict, progress=None) -> None:
    """Write result.json, design-N.yaml, design-N.cir and the builder's documents."""
    say = progress or (lambda _m: None)
    out.write("result.json", json.dumps(data, indent=2, allow_nan=False) + "\n")
    for i, v in enumerate(result.designs, start=1):
        d = v.design
        header = [
            f"design {i} of {len(result.designs)} for spec {spec.name} ({result.status}), margin {v.margin:+.3f}",
            "written by stagefit design; check it with: stagefit check THIS_FILE --spec SPEC",
        ]
        out.write(f"design-{i}.yaml", design_yaml(d, header, v.items, rated.get(id(v))))
        out.write(f"design-{i}.cir", to_spice(v.analysis.circuit, d.supply.nominal, d.ambient.nominal - 273.15,
                                             title=f"stagefit design {i} for {spec.name}: {d.topology} with {d.transistor}"))
    if result.designs:
        try:
            from . import documents
        except ImportError:  # the builder's documents are optional until written
            return
        say("writing the BOM, buy list and report")
        documents.write_documents(out, spec, result, rated)
