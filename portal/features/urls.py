from django.urls import path

from portal.features import views

app_name = "features"
urlpatterns = [
    path("studies/<slug:study_slug>/", views.study_sets, name="study"),
    path("studies/<slug:study_slug>/new/", views.new_set, name="new"),
    path("<int:set_id>/", views.set_detail, name="detail"),
    path("<int:set_id>/status/", views.set_status, name="status"),
    path("<int:set_id>/summary/", views.set_summary_view, name="summary"),
    path("<int:set_id>/table.<slug:fmt>", views.download, name="download"),
    path("<int:set_id>/plots/<slug:plot>.svg", views.plot, name="plot"),
]
