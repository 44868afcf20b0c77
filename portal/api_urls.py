"""The JSON API for scripts and lab servers (token: ``Authorization: Bearer cairn_…``).

Every endpoint is declared once in ``ENDPOINTS``: the URL patterns below and the OpenAPI
description (/api/v1/openapi.json, portal/api_spec.py) are both made from it.
"""

from portal import api_spec as spec
from portal.api_spec import (
    ANY_OBJECT,
    BOOLEAN,
    INTEGER,
    STRING,
    Endpoint,
    array,
    list_query,
    nullable,
    obj,
    page_of,
)
from portal.dashboard.views import api_me
from portal.datasets import api
from portal.datasets.models import UploadMode
from portal.features import api as features_api
from portal.jobs.views import api_job
from portal.quality import api as quality_api
from portal.studies import api as studies_api
from portal.training import api as training_api

ME_SCHEMA = obj({"username": STRING, "operator": BOOLEAN,
                 "roles": array(obj({"site": STRING, "study": STRING, "role": STRING})),
                 "sees_whole_study": array(STRING), "visible_sites": array(STRING),
                 "visible_studies": array(STRING)})
JOB_SCHEMA = obj({"id": INTEGER, "kind": STRING, "state": STRING, "attempts": INTEGER,
                  "transient_failures": INTEGER, "progress": ANY_OBJECT,
                  "error": nullable(STRING), "result": {}, "created_at": STRING,
                  "finished_at": nullable(STRING)}, extra=True)
UPLOAD_SCHEMA = obj({"upload": INTEGER, "state": STRING, "site": STRING, "study": STRING,
                     "mode": STRING, "dataset_version": nullable(INTEGER),
                     "errors": array({}), "warnings": array({}), "job": {},
                     "allow_removals": BOOLEAN}, extra=True)
UPLOAD_BODY = {"type": "object", "required": ["site", "study", "size"], "properties": {
    "site": STRING, "study": STRING, "mode": {"type": "string", "enum": list(UploadMode.values)},
    "filename": STRING, "size": INTEGER, "allow_removals": BOOLEAN}}
RUN_REPORT_SCHEMA = obj({"run": INTEGER, "state": STRING, "error": nullable(STRING),
                         "warning": nullable(STRING), "models": ANY_OBJECT,
                         "statistics": {}}, extra=True)
WRITE_ERRORS = (401, 403, 404, 409)

ENDPOINTS = [
    Endpoint("openapi", "get", "openapi.json", spec.openapi_json,
             "This description (no token needed)", "about", ANY_OBJECT, public=True,
             errors=()),
    Endpoint("me", "get", "me/", api_me, "Who the token acts for: roles, visible sites and "
             "studies", "about", ME_SCHEMA, errors=()),
    Endpoint("studies", "get", "studies/", studies_api.studies,
             "Studies the token sees data of, with the sites seen in each", "studies",
             page_of(studies_api.STUDY_SCHEMA), query=list_query("created_after",
                                                                 "created_before"),
             errors=()),
    Endpoint("sites", "get", "sites/", studies_api.sites,
             "Sites whose data the token sees, with the studies each is seen in", "studies",
             page_of(studies_api.SITE_SCHEMA),
             query=list_query("study", "created_after", "created_before"), errors=()),
    Endpoint("versions", "get", "versions/", api.versions,
             "Dataset versions the token sees, newest first", "datasets",
             page_of(api.VERSION_SCHEMA),
             query=list_query("study", "site", "created_after", "created_before"), errors=()),
    Endpoint("version", "get", "versions/<int:version_id>/", api.version,
             "One dataset version with a summary of its manifest", "datasets",
             api.VERSION_DETAIL_SCHEMA),
    Endpoint("version_download", "get", "versions/<int:version_id>/download/",
             api.version_download, "The whole version as a zip (the web download's rules)",
             "datasets", media="application/zip"),
    Endpoint("quality_rounds", "get", "quality/rounds/", quality_api.rounds,
             "Quality rounds of the dataset versions the token sees", "quality",
             page_of(quality_api.ROUND_SCHEMA),
             query=list_query("study", "site", "version", "created_after", "created_before"),
             errors=()),
    Endpoint("quality_round", "get", "quality/rounds/<int:round_id>/",
             quality_api.round_detail, "One quality round with its verdict counts", "quality",
             quality_api.ROUND_DETAIL_SCHEMA),
    Endpoint("quality_results", "get", "quality/rounds/<int:round_id>/results/",
             quality_api.round_results,
             "The round's results, one per checked recording file", "quality",
             page_of(quality_api.RESULT_SCHEMA),
             query=list_query(state=quality_api.VERDICTS)),
    Endpoint("quality_derivative", "get", "quality/rounds/<int:round_id>/derivative/",
             quality_api.derivative, "The round as a BIDS derivative zip", "quality",
             media="application/zip"),
    Endpoint("quality_result", "get", "quality/results/<int:run_id>/",
             quality_api.result_detail, "One quality result: verdict, channels, reasons",
             "quality", quality_api.RESULT_DETAIL_SCHEMA),
    Endpoint("feature_sets", "get", "feature-sets/", features_api.feature_sets,
             "Feature sets whose every site the token sees", "features",
             page_of(features_api.SET_SCHEMA),
             query=list_query("study", "site", "created_after", "created_before",
                              state=features_api.STATES), errors=()),
    Endpoint("feature_set", "get", "feature-sets/<int:set_id>/", features_api.feature_set,
             "One feature set: its versions, parameters and table hash", "features",
             features_api.SET_DETAIL_SCHEMA),
    Endpoint("feature_set_download", "get", "feature-sets/<int:set_id>/table.parquet",
             features_api.feature_set_download, "The feature table as Parquet", "features",
             media="application/vnd.apache.parquet"),
    Endpoint("training_runs", "get", "training/runs/", training_api.runs,
             "Training runs the token sees, with pooled scores per model", "training",
             page_of(training_api.RUN_SCHEMA),
             query=list_query("study", "feature_set", "created_after", "created_before",
                              state=training_api.RUN_STATES), errors=()),
    Endpoint("training_run_detail", "get", "training/runs/<int:training_id>/",
             training_api.run_detail, "One training run: spec, fold and pooled scores",
             "training", training_api.RUN_DETAIL_SCHEMA),
    Endpoint("releases", "get", "releases/", training_api.releases,
             "Model releases the token may use for a site", "training",
             page_of(training_api.RELEASE_SCHEMA),
             query=list_query("study", "site", "created_after", "created_before",
                              state=training_api.RELEASE_STATES), errors=()),
    Endpoint("release", "get", "releases/<int:release_id>/", training_api.release_detail,
             "One model release with its scores and file hashes", "training",
             training_api.RELEASE_DETAIL_SCHEMA),
    Endpoint("release_download", "get", "releases/<int:release_id>/<slug:part>/",
             training_api.release_download,
             "One file of a release (bundle zip, skops model, card, feature spec)", "training",
             media=("application/zip", "application/octet-stream", "text/markdown",
                    "application/json"), query={"site": spec.QUERY["site"]},
             errors=(401, 403, 404, 410)),
    Endpoint("job", "get", "jobs/<int:job_id>/", api_job, "A background job's state",
             "jobs", JOB_SCHEMA),
    Endpoint("uploads", "post", "uploads/", api.create_upload,
             "Announce an upload (then send chunks, then finish)", "uploads", UPLOAD_SCHEMA,
             ok=201, body=UPLOAD_BODY, errors=WRITE_ERRORS),
    Endpoint("upload", "get", "uploads/<int:upload_id>/", api.upload_status,
             "An upload's state", "uploads", UPLOAD_SCHEMA),
    Endpoint("upload_chunk", "put", "uploads/<int:upload_id>/chunks/", api.upload_chunk,
             "Send bytes at ?offset=N", "uploads", UPLOAD_SCHEMA,
             query={"offset": spec.QUERY["offset"]},
             body={"type": "string", "format": "binary"},
             body_media="application/octet-stream", errors=WRITE_ERRORS + (413,)),
    Endpoint("upload_finish", "post", "uploads/<int:upload_id>/finish/", api.finish_upload,
             "Finish with the whole file's sha256; validation is queued", "uploads",
             UPLOAD_SCHEMA, ok=202, other_ok=(422,),
             body=obj({"sha256": STRING}, extra=True), errors=WRITE_ERRORS),
    Endpoint("upload_confirm", "post", "uploads/<int:upload_id>/confirm/",
             api.confirm_upload, "Allow (or refuse) the removals a held upload would make",
             "uploads", UPLOAD_SCHEMA, other_ok=(202,),
             body=obj({"allow_removals": BOOLEAN}, extra=True), errors=WRITE_ERRORS),
    Endpoint("training", "post", "training/", training_api.create_run,
             "Start a training run from a spec", "training", RUN_REPORT_SCHEMA, ok=201,
             body={"type": "object", "required": ["feature_set"],
                   "properties": {"feature_set": INTEGER}}, errors=WRITE_ERRORS),
    Endpoint("training_run", "get", "training/<int:training_id>/", training_api.run_status,
             "A training run's state and scores", "training", RUN_REPORT_SCHEMA),
]

app_name = "api"
urlpatterns = [endpoint.pattern() for endpoint in ENDPOINTS]
