"""The RO-Crate of a reviewer archive: every ledger record as a CreateAction.

The crate (``ro-crate-metadata.json`` at the root of the bag's payload,
RO-Crate 1.1) conforms to the Workflow Run Crate profile: its main entity is
the Snakemake workflow (``workflow/Snakefile``), one CreateAction stands for
the whole run (instrument: the workflow), and one CreateAction per ledger
record stands for each job (Process Run Crate: instrument = the wavetrail
step as a SoftwareApplication with ``softwareVersion``; ``object`` = its input
files and its parameters as PropertyValue; ``result`` = its output files;
``startTime`` / ``endTime`` from the record). Files kept out of the archive
(raw data in ``exclude`` or ``stand-in`` mode, person-level outputs) appear as
contextual entities that carry their sha256 but no bytes; a stand-in file
carries the label that it is not the real data.

Ids and dates are fixed (from the records and the commit), so the same
project packs into the same bytes.

References
----------
Soiland-Reyes, S., et al. (2022). Packaging research artefacts with RO-Crate.
Data Science 5(2), 97-138.
Leo, S., et al. (2024). Recording provenance of workflow runs with RO-Crate.
PLOS ONE 19(9), e0309210.
"""

from __future__ import annotations

import json
from pathlib import PurePosixPath

from rocrate.rocrate import ROCrate

RO_CRATE_VERSION = "1.1"
PROFILES = (
    "https://w3id.org/ro/wfrun/process/0.5",
    "https://w3id.org/ro/wfrun/workflow/0.5",
    "https://w3id.org/workflowhub/workflow-ro-crate/1.0",
)
WORKFLOW_FILE = "workflow/Snakefile"
_COMPLETED = "http://schema.org/CompletedActionStatus"

_FORMATS = {".csv": "text/csv", ".json": "application/json", ".yaml": "application/yaml",
            ".yml": "application/yaml", ".md": "text/markdown", ".html": "text/html",
            ".ipynb": "application/x-ipynb+json", ".png": "image/png", ".svg": "image/svg+xml",
            ".txt": "text/plain", ".lock": "text/plain", ".smk": "text/plain", ".py": "text/x-python"}


def _ref(id_: str) -> dict:
    return {"@id": id_}


def _format(path: str) -> str | None:
    return _FORMATS.get(PurePosixPath(path).suffix.lower())


def _value(v):
    if v is None or isinstance(v, (bool, int, float, str)):
        return v
    return json.dumps(v, sort_keys=True)


def build_crate(*, title: str, description: str, date: str, license_text: str | None,
                records: list[dict], payload: dict, withheld: dict, standin: dict | None,
                wavetrail_version: str, snakemake_version: str | None, commit: str | None,
                mode: str) -> dict:
    """The crate's JSON-LD as a dict.

    Parameters
    ----------
    title, description, date : str
        Root dataset name, description and ``datePublished`` (ISO 8601).
    license_text : str or None
        A licence URL or text; ``None`` records that the authors named none.
    records : list of dict
        Ledger records (``wavetrail.ledger.read_records``).
    payload : dict
        ``{path: {"sha256", "size"}}`` of every file in the archive.
    withheld : dict
        ``{path: {"sha256", "size", "reason"}}`` of files left out.
    standin : dict or None
        ``{"path", "sha256", "replaces": [paths], "note"}`` in stand-in mode.
    wavetrail_version, snakemake_version, commit, mode : str
        What the root and the software entities name.
    """
    crate = ROCrate(version=RO_CRATE_VERSION)
    root = crate.root_dataset
    root["name"] = title
    root["description"] = description
    root["datePublished"] = date
    root["conformsTo"] = [_ref(p) for p in PROFILES]
    if license_text and license_text.startswith(("http://", "https://")):
        root["license"] = _ref(license_text)
    else:
        crate.add_jsonld({"@id": "#license", "@type": "CreativeWork", "name": "Licence",
                          "description": license_text or "The authors named no licence for this archive; "
                                                         "ask them before reusing its content."})
        root["license"] = _ref("#license")
    if commit:
        root["version"] = commit
    root["keywords"] = ["panel study", "reviewer archive", f"data mode: {mode}"]

    crate.add_jsonld({"@id": "#snakemake", "@type": "ComputerLanguage", "name": "Snakemake",
                      "identifier": _ref("https://snakemake.github.io"),
                      "url": _ref("https://snakemake.github.io"),
                      **({"version": snakemake_version} if snakemake_version else {})})
    app_id = f"#software/wavetrail-{wavetrail_version}"
    packages = {}
    for rec in records:
        for name, version in sorted((rec.get("packages") or {}).items()):
            if version:
                packages[f"#software/{name}-{version}"] = (name, version)
    for pid, (name, version) in sorted(packages.items()):
        if pid == app_id:
            continue
        crate.add_jsonld({"@id": pid, "@type": "SoftwareApplication", "name": name, "softwareVersion": version})
    crate.add_jsonld({"@id": app_id, "@type": "SoftwareApplication", "name": "wavetrail",
                      "softwareVersion": wavetrail_version,
                      "description": "Runs each workflow step of the project (one Python function per rule).",
                      "softwareRequirements": [_ref(p) for p in sorted(packages) if p != app_id]})

    # data entities: every payload file; contextual entities for files kept out
    parts = []
    stand_path = standin["path"] if standin else None
    for path in sorted(payload):
        if path == "ro-crate-metadata.json":
            continue
        info = payload[path]
        props = {"@id": path, "@type": "File", "name": PurePosixPath(path).name,
                 "contentSize": str(info["size"]), "identifier": f"sha256:{info['sha256']}"}
        fmt = _format(path)
        if fmt:
            props["encodingFormat"] = fmt
        if path == WORKFLOW_FILE:
            props["@type"] = ["File", "SoftwareSourceCode", "ComputationalWorkflow"]
            props["name"] = "Snakemake workflow of the project"
            props["programmingLanguage"] = _ref("#snakemake")
        if path == stand_path:
            props["name"] = f"STAND-IN data (not the real data): {PurePosixPath(path).name}"
            props["description"] = standin["note"]
            props["isBasedOn"] = [_ref(_withheld_id(p)) for p in standin.get("replaces", [])]
        crate.add_jsonld(props)
        parts.append(_ref(path))
    for path in sorted(withheld):
        info = withheld[path]
        crate.add_jsonld({"@id": _withheld_id(path), "@type": "CreativeWork", "name": path,
                          "description": f"Not in this archive: {info['reason']}. Only its hash is kept.",
                          "contentSize": str(info["size"]) if info.get("size") is not None else "unknown",
                          "identifier": f"sha256:{info['sha256']}"})
    root["hasPart"] = parts
    if WORKFLOW_FILE in payload:
        root["mainEntity"] = _ref(WORKFLOW_FILE)

    def file_ref(entry: dict) -> dict:
        p = entry["path"]
        if p in payload:
            return _ref(p)
        if p in withheld:
            return _ref(_withheld_id(p))
        missing_id = _withheld_id(p)
        if crate.get(missing_id) is None:
            crate.add_jsonld({"@id": missing_id, "@type": "CreativeWork", "name": p,
                              "description": "Named by the ledger but not in this archive.",
                              "identifier": f"sha256:{entry.get('sha256')}"})
        return _ref(missing_id)

    actions = []
    all_in, all_out, starts, ends = {}, {}, [], []
    for rec in records:
        stem = PurePosixPath(rec["_file"]).stem if rec.get("_file") else rec["step"]
        run_id = f"#run/{stem}"
        objects = [file_ref(e) for e in rec["inputs"]]
        values = [("seed", "seed", rec.get("seed"))]
        values += [(f"wildcard-{k}", f"wildcard {k}", v) for k, v in sorted((rec.get("wildcards") or {}).items())]
        values += [(f"params.{k}", k, v) for k, v in sorted((rec.get("params") or {}).items())]
        for slug, key, value in values:
            vid = f"#param/{stem}/{slug.replace(' ', '-')}"
            crate.add_jsonld({"@id": vid, "@type": "PropertyValue", "name": key, "value": _value(value)})
            objects.append(_ref(vid))
        results = [file_ref(e) for e in rec["outputs"]]
        version = rec.get("wavetrail") or wavetrail_version
        instrument = f"#software/wavetrail-{version}"
        if crate.get(instrument) is None:
            crate.add_jsonld({"@id": instrument, "@type": "SoftwareApplication", "name": "wavetrail",
                              "softwareVersion": version})
        props = {"@type": "CreateAction", "name": f"wavetrail step {rec['step']}" + "".join(
            f" {k}={v}" for k, v in sorted((rec.get("wildcards") or {}).items())),
            "actionStatus": _ref(_COMPLETED)}
        if rec.get("started"):
            props["startTime"] = rec["started"]
            starts.append(rec["started"])
        if rec.get("finished"):
            props["endTime"] = rec["finished"]
            ends.append(rec["finished"])
        props["description"] = (f"git commit {(rec.get('git') or {}).get('commit')}"
                                f"{' (uncommitted changes)' if (rec.get('git') or {}).get('dirty') else ''}; "
                                f"{rec.get('python')}; {rec.get('platform')}; "
                                f"environment lock sha256 {rec.get('lock_sha256')}")
        crate.add_action(_ref(instrument), identifier=run_id, object=objects, result=results, properties=props)
        actions.append(_ref(run_id))
        for e in rec["inputs"]:
            all_in[e["path"]] = e
        for e in rec["outputs"]:
            all_out[e["path"]] = e
    if WORKFLOW_FILE in payload:
        leaves = [e for p, e in sorted(all_in.items()) if p not in all_out]
        props = {"@type": "CreateAction", "name": "workflow run (all recorded jobs)",
                 "actionStatus": _ref(_COMPLETED)}
        if starts:
            props["startTime"] = min(starts)
        if ends:
            props["endTime"] = max(ends)
        crate.add_action(_ref(WORKFLOW_FILE), identifier="#run/workflow",
                         object=[file_ref(e) for e in leaves],
                         result=[file_ref(e) for _, e in sorted(all_out.items())], properties=props)
        actions.insert(0, _ref("#run/workflow"))
    root["mentions"] = actions
    graph = crate.metadata.generate()
    return graph


def _withheld_id(path: str) -> str:
    return f"#withheld/{path}"
