from django.contrib import admin
from django.urls import include, path

urlpatterns = [
    path("", include("portal.dashboard.urls")),
    path("account/", include("portal.accounts.urls")),
    path("studies/", include("portal.studies.urls")),
    path("data/", include("portal.datasets.urls")),
    path("quality/", include("portal.quality.urls")),
    path("features/", include("portal.features.urls")),
    path("training/", include("portal.training.urls")),
    path("jobs/", include("portal.jobs.urls")),
    path("audit/", include("portal.audit.urls")),
    path("audit/", include("portal.lineage.urls")),
    path("api/v1/", include("portal.api_urls")),
    path("operator/", admin.site.urls),
]
