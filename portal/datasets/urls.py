from django.urls import path

from portal.datasets import views

app_name = "datasets"
urlpatterns = [
    path("uploads/<int:upload_id>/", views.upload_detail, name="upload"),
]
