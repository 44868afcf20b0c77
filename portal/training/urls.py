from django.urls import path

from portal.training import views

app_name = "training"
urlpatterns = [
    path("studies/<slug:study_slug>/", views.study_runs, name="study"),
    path("studies/<slug:study_slug>/new/", views.new_run, name="new"),
    path("studies/<slug:study_slug>/compare/", views.compare, name="compare"),
    path("<int:training_id>/", views.run_detail, name="detail"),
    path("<int:training_id>/rerun/", views.rerun_view, name="rerun"),
    path("<int:training_id>/status/", views.run_status, name="status"),
    path("<int:training_id>/spec-diff/", views.spec_diff, name="spec_diff"),
    path("<int:training_id>/scores.svg", views.plot, name="plot"),
    path("<int:training_id>/summary/", views.run_summary_view, name="summary"),
    path("releases/<int:release_id>/approve/", views.approve_view, name="approve"),
    path("releases/<int:release_id>/withdraw/", views.withdraw_view, name="withdraw"),
    path("sites/<slug:site_slug>/releases/", views.site_releases, name="releases"),
    path("sites/<slug:site_slug>/releases/<int:release_id>/<slug:part>", views.release_file,
         name="release_file"),
]
