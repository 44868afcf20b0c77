from django.urls import path

from portal.jobs import views

app_name = "jobs"
urlpatterns = [
    path("<int:job_id>/", views.job_detail, name="detail"),
    path("<int:job_id>/progress/", views.job_progress, name="progress"),
]
