from django.urls import path

from portal.audit import views

app_name = "audit"
urlpatterns = [
    path("", views.event_list, name="events"),
    path("events.csv", views.export_csv, name="export"),
]
