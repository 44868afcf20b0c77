from django.urls import path

from portal.dashboard import views

app_name = "dashboard"
urlpatterns = [
    path("", views.home, name="home"),
    path("studies/<slug:study_slug>/", views.study_overview, name="study"),
    path("sites/<slug:site_slug>/", views.site_page, name="site"),
]
