"""The JSON API for scripts and lab servers (token: ``Authorization: Bearer cairn_…``)."""

from django.urls import path

from portal.dashboard.views import api_me
from portal.datasets.views import api_upload
from portal.jobs.views import api_job

app_name = "api"
urlpatterns = [
    path("me/", api_me, name="me"),
    path("jobs/<int:job_id>/", api_job, name="job"),
    path("uploads/<int:upload_id>/", api_upload, name="upload"),
]
