from django.urls import path

from portal.studies import views

app_name = "studies"
urlpatterns = [
    path("<slug:study_slug>/protocol/", views.protocol, name="protocol"),
    path("<slug:study_slug>/protocol/edit/", views.protocol_edit, name="protocol_edit"),
]
