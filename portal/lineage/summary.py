"""A lineage document read per site: which records describe which site's data, and for each
site its dataset versions (number, manifest hash), how many files and recordings they hold and
how many quality results were made from them, counted from the PROV document itself so the
page says exactly what the document says.

A record belongs to a site when it is that site's dataset version (full or summary), a file
of it (``hadMember``), the upload that made the version (``wasGeneratedBy``), a quality check
that used one of its files (``used``) or that check's result. Everything else (feature
computation, training, models, people and workers) is a step shared by all sites.
"""

import json

from prov.model import ProvGeneration, ProvMembership, ProvUsage

#: The file a recording is read from (its companions, .eeg/.vmrk/.fdt, are not counted).
RECORDING_EXTENSIONS = (".edf", ".bdf", ".vhdr", ".set")
VERSION_TYPES = ("cairn:DatasetVersion", "cairn:DatasetVersionSummary")


def _attributes(record):
    return {str(k): v for k, v in record.attributes}


def _type(record):
    return str(_attributes(record).get("prov:type", ""))


def per_site(doc):
    """({record id: site slug}, [site summaries by slug]) of a PROV document built by
    :mod:`portal.lineage.prov`. A summary: slug, versions [{number, manifest_sha256,
    summary}], full (some version shown in full), files, recordings, quality_results,
    settings (the distinct quality settings, indented JSON)."""
    elements = {str(r.identifier): r for r in doc.get_records() if not r.is_relation()}
    members, generated, used = {}, {}, {}
    for relation in doc.get_records():
        args = [str(a) for a in relation.args]
        if isinstance(relation, ProvMembership):
            members.setdefault(args[0], []).append(args[1])
        elif isinstance(relation, ProvGeneration):
            generated.setdefault(args[1], []).append(args[0])
        elif isinstance(relation, ProvUsage):
            used.setdefault(args[0], []).append(args[1])
    site_of, sites = {}, {}
    for ident, record in elements.items():
        if _type(record) not in VERSION_TYPES:
            continue
        attributes = _attributes(record)
        slug = str(attributes["cairn:site"])
        site = sites.setdefault(slug, {"slug": slug, "versions": [], "files": set(),
                                       "recordings": 0, "summary_files": 0,
                                       "quality_results": 0, "settings": []})
        site_of[ident] = slug
        summary = _type(record) == "cairn:DatasetVersionSummary"
        site["versions"].append({"number": int(attributes["cairn:number"]), "summary": summary,
                                 "manifest_sha256": str(attributes["cairn:manifest_sha256"])})
        if summary:
            site["summary_files"] += int(attributes["cairn:files"])
            site["recordings"] += int(attributes["cairn:recordings"])
        for member in members.get(ident, []):
            site_of.setdefault(member, slug)
            site["files"].add(member)
    for activity, made in generated.items():
        for entity in made:
            if entity in elements and _type(elements[entity]) in VERSION_TYPES:
                site_of.setdefault(activity, site_of[entity])
    for ident, record in elements.items():
        if _type(record) != "cairn:QualityCheck":
            continue
        slug = next((site_of[f] for f in used.get(ident, []) if f in site_of), None)
        if slug is None:
            continue
        site_of[ident] = slug
        settings = str(_attributes(record).get("cairn:settings", ""))
        if settings:
            settings = json.dumps(json.loads(settings), indent=2, sort_keys=True)
        if settings and settings not in sites[slug]["settings"]:
            sites[slug]["settings"].append(settings)
        for result in generated.get(ident, []):
            site_of[result] = slug
            sites[slug]["quality_results"] += 1
    out = []
    for slug in sorted(sites):
        site = sites[slug]
        data_files = [f for f in site["files"] if str(_attributes(elements[f]).get(
            "cairn:path", "")).lower().endswith(RECORDING_EXTENSIONS)]
        site["recordings"] += len(data_files)
        site["files"] = len(site["files"]) + site.pop("summary_files")
        site["versions"].sort(key=lambda v: v["number"])
        site["full"] = any(not v["summary"] for v in site["versions"])
        out.append(site)
    return site_of, out
