"""Mounted under audit/ beside the audit trail, so the pages keep the addresses they had."""

from django.urls import path

from portal.lineage import views

app_name = "lineage"
urlpatterns = [
    path("lineage/<slug:lineage_kind>/<int:object_id>/", views.lineage_page, name="page"),
    path("lineage/<slug:lineage_kind>/<int:object_id>/prov.json", views.lineage_prov,
         name="prov"),
    path("derived/<slug:lineage_kind>/<int:object_id>/", views.derived_page, name="derived"),
    path("reproduce/<slug:subject_kind>/<int:object_id>/", views.reproduce_view,
         name="reproduce"),
]
