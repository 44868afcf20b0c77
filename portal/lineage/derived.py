"""What was made from an object: the downstream side of lineage.

From an upload, a dataset version, a recording, a quality result, a feature set or a
training run, :func:`derived` walks to everything computed from it: later versions, quality
rounds and results, feature sets, training runs (and their re-runs) and model releases.
Objects the reader may not open (a feature set pooled with other sites' data, say) appear
as summaries: their kind, the sites whose data went in, counts and content hashes, with no
link and nothing of the other sites' participants or files.
"""

from dataclasses import dataclass, field

from django.urls import reverse

from portal.accounts.permissions import Action, can
from portal.features.access import may_see, set_sites
from portal.quality.access import qc_run_visible
from portal.training.access import release_sites

ROOT_KINDS = ("upload", "version", "recording", "qc", "features", "training")


@dataclass
class Node:
    kind: str
    obj: object
    depth: int
    via: str
    label: str = ""
    url: str | None = None
    visible: bool = True
    facts: list = field(default_factory=list)


class Walk:
    def __init__(self, user):
        self.user = user
        self.nodes = []
        self.seen = set()
        self._sites = {}

    # --- who may open what -------------------------------------------------------------
    def set_sites(self, feature_set):
        if feature_set.pk not in self._sites:
            self._sites[feature_set.pk] = set_sites(feature_set)
        return self._sites[feature_set.pk]

    def sees(self, owner):
        """``owner`` is an upload or a dataset version: its (site, study) decides."""
        return can(self.user, Action.VIEW, site=owner.site_id, study=owner.study_id)

    def sees_set(self, feature_set):
        return may_see(self.user, feature_set, self.set_sites(feature_set))

    # --- the walk ------------------------------------------------------------------------
    def add(self, kind, obj, depth, via):
        key = (kind, obj.pk)
        if key in self.seen:
            return None
        self.seen.add(key)
        node = Node(kind, obj, depth, via)
        getattr(self, f"_describe_{kind}")(node)
        self.nodes.append(node)
        return node

    def walk(self, kind, obj, depth=0, via=""):
        node = self.add(kind, obj, depth, via)
        if node is None:
            return
        for child_kind, child, words in getattr(self, f"_children_{kind}")(obj):
            self.walk(child_kind, child, depth + 1, words)

    def _children_upload(self, upload):
        from portal.datasets.models import DatasetVersion

        version = DatasetVersion.objects.filter(upload=upload).select_related("site").first()
        if version is not None:
            yield "version", version, "indexed as"

    def _children_version(self, version):
        from portal.datasets.models import DatasetVersion

        for child in DatasetVersion.objects.filter(parent=version).select_related("site"):
            yield "version", child, "followed by"
        for qc_round in version.qc_rounds.select_related("version__site").order_by("id"):
            yield "round", qc_round, "checked in"
        for feature_set in version.feature_sets.select_related("study").order_by("id"):
            yield "features", feature_set, "used by"

    def _children_round(self, qc_round):
        return ()

    def _children_recording(self, recording):
        from portal.features.models import FeatureSet
        from portal.quality.models import QCRun

        for run in QCRun.objects.filter(site=recording.version.site,
                                        recording_sha256=recording.sha256).order_by("id"):
            yield "qc", run, "checked as"
        for feature_set in FeatureSet.objects.filter(items__recording=recording).distinct(
                ).select_related("study").order_by("id"):
            yield "features", feature_set, "used by"

    def _children_qc(self, run):
        from portal.features.models import FeatureSet

        for feature_set in FeatureSet.objects.filter(items__qc_run=run).distinct(
                ).select_related("study").order_by("id"):
            yield "features", feature_set, "used by"

    def _children_features(self, feature_set):
        for run in feature_set.training_runs.select_related("feature_set").order_by("id"):
            yield "training", run, "trained in"

    def _children_training(self, run):
        for release in run.releases.select_related("trained_on_site", "run__feature_set"
                                                   ).order_by("id"):
            yield "release", release, "released as"
        for again in run.reruns.order_by("id"):
            yield "training", again, "re-run as"

    def _children_release(self, release):
        return ()

    # --- what each row says ----------------------------------------------------------------
    def _describe_upload(self, node):
        upload = node.obj
        node.visible = self.sees(upload)
        node.label = f"upload {upload.pk} ({upload.site.slug})"
        node.facts = [f"state {upload.state}", f"archive sha256 {upload.archive_sha256 or '—'}"]
        if node.visible:
            node.url = reverse("datasets:upload", kwargs={"upload_id": upload.pk})

    def _describe_version(self, node):
        version = node.obj
        node.visible = self.sees(version)
        node.label = f"{version.site.slug} dataset version {version.number}"
        node.facts = [f"manifest sha256 {version.manifest_sha256}"]
        if node.visible:
            node.url = reverse("datasets:version", kwargs={"version_id": version.pk})

    def _describe_round(self, node):
        qc_round = node.obj
        node.visible = self.sees(qc_round.version)
        node.label = f"quality round {qc_round.pk}"
        node.facts = [f"settings {qc_round.settings_digest[:12]}",
                      f"code {qc_round.code_version}"]
        if node.visible:
            node.url = reverse("quality:round", kwargs={"round_id": qc_round.pk})

    def _describe_recording(self, node):
        recording = node.obj
        node.visible = self.sees(recording.version)
        node.label = recording.path if node.visible else "a recording"
        node.facts = [f"sha256 {recording.sha256}"]

    def _describe_qc(self, node):
        run = node.obj
        node.visible = qc_run_visible(self.user, run)
        node.label = f"quality result {run.pk}: {run.verdict}"
        node.facts = [f"settings {run.settings_digest[:12]}", f"code {run.code_version}"]

    def _describe_features(self, node):
        feature_set = node.obj
        node.visible = self.sees_set(feature_set)
        sites = ", ".join(s.slug for s in self.set_sites(feature_set))
        node.label = f"feature set {feature_set.pk}"
        node.facts = [f"data of {sites}", f"{feature_set.n_rows} windows × "
                      f"{feature_set.n_columns} columns",
                      f"table sha256 {feature_set.table_sha256 or '—'}"]
        if node.visible:
            node.url = reverse("features:detail", kwargs={"set_id": feature_set.pk})

    def _describe_training(self, node):
        run = node.obj
        node.visible = self.sees_set(run.feature_set)
        node.label = f"training run {run.pk}"
        node.facts = [f"state {run.state}", f"spec sha256 {run.spec_digest}",
                      f"code {run.code_version}"]
        if node.visible:
            node.url = reverse("training:detail", kwargs={"training_id": run.pk})

    def _describe_release(self, node):
        release = node.obj
        node.visible = self.sees_set(release.run.feature_set) or bool(
            release_sites(self.user, release))
        node.label = f"model release {release.pk} ({release.model}, {release.kind})"
        node.facts = [f"state {release.state}", f"model sha256 {release.model_sha256}"]
        node.url = reverse("lineage:page", kwargs={"lineage_kind": "release",
                                                    "object_id": release.pk}) \
            if node.visible else None


def root_object(kind, object_id):
    from django.apps import apps

    models = {"upload": "datasets.Upload", "version": "datasets.DatasetVersion",
              "recording": "datasets.Recording", "qc": "quality.QCRun",
              "features": "features.FeatureSet", "training": "training.TrainingRun"}
    if kind not in models:
        raise ValueError(f"{kind!r}: give one of {', '.join(ROOT_KINDS)}")
    return apps.get_model(models[kind]).objects.filter(pk=object_id).first()


def derived(user, kind, obj):
    """Rows (Node) of everything made from ``obj``, depth first, the object itself first.
    ValueError if the reader may not open the object itself."""
    walk = Walk(user)
    walk.walk(kind, obj)
    if not walk.nodes[0].visible:
        raise ValueError("not visible")
    return walk.nodes
