from django.urls import path

from portal.audit import views

app_name = "audit"
urlpatterns = [
    path("", views.event_list, name="events"),
    path("events.csv", views.export_csv, name="export"),
    path("lineage/<slug:lineage_kind>/<int:object_id>/", views.lineage_page, name="lineage"),
    path("lineage/<slug:lineage_kind>/<int:object_id>/prov.json", views.lineage_prov,
         name="lineage_prov"),
    path("derived/<slug:lineage_kind>/<int:object_id>/", views.derived_page, name="derived"),
    path("reproduce/<slug:subject_kind>/<int:object_id>/", views.reproduce_view,
         name="reproduce"),
]
