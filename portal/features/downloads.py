"""The downloads of a feature set (the table as Parquet or spreadsheet-safe CSV, the column
sidecar), the one answer the web page and the API both give."""

from django.core.exceptions import PermissionDenied
from django.http import FileResponse, Http404, StreamingHttpResponse

from portal.audit.events import record
from portal.datasets import blobs
from portal.features.access import may_download, visible_set
from portal.spreadsheet import safe_frame

DOWNLOAD_KINDS = {"parquet": "application/vnd.apache.parquet", "csv": "text/csv",
                  "json": "application/json"}


def feature_set_file(request, set_id, kind):
    """One file of a finished feature set for the requesting person or token: every site of
    the set visible and downloadable (portal.features.access), recorded as a download."""
    feature_set, sites = visible_set(request.user, set_id)
    if kind not in DOWNLOAD_KINDS or feature_set.state != "done":
        raise Http404("no such download")
    if not may_download(request.user, feature_set, sites):
        raise PermissionDenied("you may not download every site's data in this feature set")
    sha = feature_set.sidecar_sha256 if kind == "json" else feature_set.table_sha256
    name = f"{feature_set.study.slug}-features-{feature_set.pk}"
    record("download", actor=request.user, token=getattr(request, "api_token", None),
           study=feature_set.study, site=sites[0] if len(sites) == 1 else None,
           target=feature_set, summary=f"downloaded feature set {feature_set.pk} as {kind}",
           outputs=[{"feature_set": feature_set.pk, "format": kind,
                     "table_sha256": feature_set.table_sha256,
                     "sidecar_sha256": feature_set.sidecar_sha256}])
    if kind == "csv":
        response = StreamingHttpResponse(csv_stream(feature_set.table_sha256),
                                         content_type=DOWNLOAD_KINDS[kind])
        response["Content-Disposition"] = f'attachment; filename="{name}.csv"'
        return response
    suffix = "parquet" if kind == "parquet" else "columns.json"
    return FileResponse(blobs.open_blob(sha), as_attachment=True, filename=f"{name}.{suffix}",
                        content_type=DOWNLOAD_KINDS[kind])


def csv_stream(table_sha256, batch_rows=2000):
    """The table as CSV, converted batch by batch (never the whole table as text); text cells
    a spreadsheet would run as formulas are made inert."""
    import pyarrow.parquet as pq

    with blobs.open_blob(table_sha256) as fh:
        source = pq.ParquetFile(fh)
        header = True
        for batch in source.iter_batches(batch_size=batch_rows):
            frame = safe_frame(batch.to_pandas())
            yield frame.to_csv(index=False, header=header, float_format="%.9g",
                               lineterminator="\n")
            header = False
