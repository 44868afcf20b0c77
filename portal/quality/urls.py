from django.urls import path

from portal.quality import views

app_name = "quality"
urlpatterns = [
    path("versions/<int:version_id>/", views.version_quality, name="version"),
    path("versions/<int:version_id>/rerun/", views.rerun, name="rerun"),
    path("rounds/<int:round_id>/", views.round_detail, name="round"),
    path("rounds/<int:round_id>/status/", views.round_status, name="round_status"),
    path("rounds/<int:round_id>/derivative/", views.download_derivative, name="derivative"),
    path("rounds/<int:round_id>/recordings/<int:recording_id>/", views.recording_quality,
         name="recording"),
    path("rounds/<int:round_id>/recordings/<int:recording_id>/override/", views.override,
         name="override"),
    path("rounds/<int:round_id>/recordings/<int:recording_id>/signal.png", views.signal_image,
         name="signal"),
    path("plots/<int:run_id>/<slug:kind>.svg", views.plot, name="plot"),
]
