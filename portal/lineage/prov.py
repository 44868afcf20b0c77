"""Where an object came from, as W3C PROV: entities (files, dataset versions, quality
results, feature sets, models), activities (uploads, quality checks, feature computation,
training) and agents (people and the workers), built with the ``prov`` package.

``build(obj)`` walks upstream from a training run, model release, feature set or dataset
version to the uploaded files, with their sha256 hashes, and records the parameters of each
step (quality settings, feature parameters, training spec) as canonical JSON.

``build(obj, full_sites=ids)`` is the view of a reader who may see only some sites: a
dataset version of any other site appears as a summary entity (site, version number,
manifest hash, counts of files and recordings) without its files, participants, quality
results or the people who uploaded it.
"""

from prov.model import ProvDocument

from cairn_science.canonical_json import canonical_text

NAMESPACE = "https://cairn.invalid/ns#"
KINDS = {"training": "training.TrainingRun", "release": "training.ModelRelease",
         "features": "features.FeatureSet", "version": "datasets.DatasetVersion"}


def _json(value):
    return canonical_text(value, allow_nan=True)


class Lineage:
    def __init__(self, full_sites=None):
        self.full_sites = None if full_sites is None else set(full_sites)
        self.doc = ProvDocument()
        self.doc.add_namespace("cairn", NAMESPACE)
        self.seen = set()
        self.files = set()
        self.worker = self.doc.agent("cairn:workers", {"prov:type": "prov:SoftwareAgent"})

    def _once(self, key):
        if key in self.seen:
            return False
        self.seen.add(key)
        return True

    def person(self, user):
        if user is None:
            return self.worker
        return self.doc.agent(f"cairn:person-{user.get_username()}",
                              {"prov:type": "prov:Person", "cairn:username": user.get_username()})

    def shows(self, site_id):
        return self.full_sites is None or site_id in self.full_sites

    def version_summary(self, version):
        entity_id = f"cairn:version-summary-{version.pk}"
        if self._once(entity_id):
            self.doc.entity(entity_id, {
                "prov:type": "cairn:DatasetVersionSummary", "cairn:site": version.site.slug,
                "cairn:number": version.number,
                "cairn:manifest_sha256": version.manifest_sha256,
                "cairn:files": version.files.count(),
                "cairn:recordings": version.recordings.count()})
        return entity_id

    def version(self, version):
        if not self.shows(version.site_id):
            return self.version_summary(version)
        entity_id = f"cairn:version-{version.pk}"
        if not self._once(entity_id):
            return entity_id
        entity = self.doc.entity(entity_id, {
            "prov:type": "cairn:DatasetVersion", "cairn:site": version.site.slug,
            "cairn:number": version.number, "cairn:manifest_sha256": version.manifest_sha256})
        upload = version.upload
        activity = self.doc.activity(f"cairn:upload-{upload.pk}", upload.created_at, None, {
            "prov:type": "cairn:Upload", "cairn:archive_sha256": upload.archive_sha256 or ""})
        self.doc.wasGeneratedBy(entity, activity)
        self.doc.wasAssociatedWith(activity, self.person(upload.created_by))
        for item in version.files.all():
            file_id = f"cairn:file-{item.sha256}"
            if file_id not in self.seen:
                self.seen.add(file_id)
                self.doc.entity(file_id, {"prov:type": "cairn:File", "cairn:path": item.path,
                                          "cairn:sha256": item.sha256, "cairn:bytes": item.bytes})
            self.files.add(item.sha256)
            self.doc.hadMember(entity_id, file_id)
            self.doc.used(activity, file_id)
        if version.parent_id:
            self.doc.wasDerivedFrom(entity, self.version(version.parent))
        return entity_id

    def feature_set(self, feature_set):
        entity_id = f"cairn:featureset-{feature_set.pk}"
        if not self._once(entity_id):
            return entity_id
        entity = self.doc.entity(entity_id, {
            "prov:type": "cairn:FeatureSet", "cairn:table_sha256": feature_set.table_sha256,
            "cairn:key_sha256": feature_set.key_sha256,
            "cairn:code_version": feature_set.code_version})
        activity = self.doc.activity(f"cairn:compute-features-{feature_set.pk}",
                                     feature_set.created_at, feature_set.finished_at,
                                     {"prov:type": "cairn:FeatureComputation",
                                      "cairn:params_digest": feature_set.params_digest,
                                      "cairn:params": _json(feature_set.params)})
        self.doc.wasGeneratedBy(entity, activity)
        self.doc.wasAssociatedWith(activity, self.person(feature_set.created_by))
        for version in feature_set.versions.select_related("site", "upload"):
            self.doc.used(activity, self.version(version))
        for item in feature_set.items.select_related("qc_run", "recording"):
            if not self.shows(item.qc_run.site_id):
                continue
            qc_id = f"cairn:qc-{item.qc_run_id}"
            if self._once(qc_id):
                qc = self.doc.entity(qc_id, {"prov:type": "cairn:QualityResult",
                                             "cairn:verdict": item.qc_run.verdict,
                                             "cairn:settings_digest":
                                                 item.qc_run.settings_digest})
                check = self.doc.activity(f"cairn:quality-check-{item.qc_run_id}",
                                          item.qc_run.created_at, None,
                                          {"prov:type": "cairn:QualityCheck",
                                           "cairn:code_version": item.qc_run.code_version,
                                           "cairn:settings": _json(item.qc_run.settings)})
                self.doc.wasGeneratedBy(qc, check)
                self.doc.used(check, f"cairn:file-{item.recording.sha256}")
                self.doc.wasAssociatedWith(check, self.worker)
            self.doc.used(activity, qc_id)
        return entity_id

    def training(self, run):
        activity_id = f"cairn:training-{run.pk}"
        if not self._once(activity_id):
            return activity_id
        activity = self.doc.activity(activity_id, run.created_at, run.finished_at, {
            "prov:type": "cairn:Training", "cairn:spec_digest": run.spec_digest,
            "cairn:code_version": run.code_version, "cairn:spec": _json(run.spec)})
        self.doc.wasAssociatedWith(activity, self.person(run.created_by))
        self.doc.used(activity, self.feature_set(run.feature_set))
        scores = self.doc.entity(f"cairn:scores-{run.pk}", {"prov:type": "cairn:Scores"})
        self.doc.wasGeneratedBy(scores, activity)
        for release in run.releases.all():
            self.release(release, activity)
        return activity_id

    def release(self, release, activity=None):
        entity_id = f"cairn:model-{release.model_sha256}"
        if not self._once(entity_id):
            return entity_id
        entity = self.doc.entity(entity_id, {
            "prov:type": "cairn:Model", "cairn:model": release.model,
            "cairn:sha256": release.model_sha256, "cairn:digest": release.model_digest,
            "cairn:state": release.state})
        self.doc.wasGeneratedBy(entity, activity or self.training(release.run))
        return entity_id


def build(obj, full_sites=None):
    """A Lineage walked upstream from ``obj``; ``full_sites`` (site ids) limits what is
    shown in full, the rest being summaries."""
    lineage = Lineage(full_sites)
    label = obj._meta.label
    if label == "training.TrainingRun":
        lineage.training(obj)
    elif label == "training.ModelRelease":
        lineage.training(obj.run)
    elif label == "features.FeatureSet":
        lineage.feature_set(obj)
    elif label == "datasets.DatasetVersion":
        lineage.version(obj)
    else:
        raise ValueError(f"no lineage for {label}")
    return lineage


def resolve(ref):
    """An object from a reference like ``training:4``, ``release:2``, ``features:1`` or
    ``version:3``; ValueError naming the known kinds otherwise."""
    from django.apps import apps

    kind, _, ident = ref.partition(":")
    if kind not in KINDS or not ident.isdigit():
        raise ValueError(f"{ref!r}: give KIND:ID with KIND one of {', '.join(KINDS)}")
    model = apps.get_model(KINDS[kind])
    obj = model.objects.filter(pk=int(ident)).first()
    if obj is None:
        raise ValueError(f"{ref!r}: no such {kind}")
    return obj


def provenance_json(obj, full_sites=None):
    return build(obj, full_sites).doc.serialize(format="json", indent=2)
