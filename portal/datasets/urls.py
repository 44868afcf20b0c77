from django.urls import path

from portal.datasets import views

app_name = "datasets"
urlpatterns = [
    path("sites/<slug:site_slug>/upload/", views.upload_new, name="upload_new"),
    path("uploads/<int:upload_id>/", views.upload_detail, name="upload"),
    path("uploads/<int:upload_id>/status/", views.upload_status, name="upload_status"),
    path("uploads/<int:upload_id>/report.<slug:fmt>", views.upload_report, name="upload_report"),
    path("uploads/<int:upload_id>/confirm/", views.upload_confirm, name="upload_confirm"),
    path("uploads/<int:upload_id>/cancel/", views.upload_cancel, name="upload_cancel"),
    path("versions/<int:version_id>/", views.version_detail, name="version"),
    path("versions/<int:version_id>/restore/", views.version_restore, name="restore"),
    path("versions/<int:version_id>/download/", views.download_version, name="download_version"),
    path("versions/<int:version_id>/files/<int:file_id>/", views.download_file,
         name="download_file"),
]
