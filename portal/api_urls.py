"""The JSON API for scripts and lab servers (token: ``Authorization: Bearer cairn_…``)."""

from django.urls import path

from portal.dashboard.views import api_me
from portal.datasets import api
from portal.jobs.views import api_job
from portal.training import api as training_api

app_name = "api"
urlpatterns = [
    path("me/", api_me, name="me"),
    path("jobs/<int:job_id>/", api_job, name="job"),
    path("uploads/", api.create_upload, name="uploads"),
    path("uploads/<int:upload_id>/", api.upload_status, name="upload"),
    path("uploads/<int:upload_id>/chunks/", api.upload_chunk, name="upload_chunk"),
    path("uploads/<int:upload_id>/finish/", api.finish_upload, name="upload_finish"),
    path("uploads/<int:upload_id>/confirm/", api.confirm_upload, name="upload_confirm"),
    path("training/", training_api.create_run, name="training"),
    path("training/<int:training_id>/", training_api.run_status, name="training_run"),
]
