from django.urls import path

from portal.accounts import views

app_name = "accounts"
urlpatterns = [
    path("login/", views.login, name="login"),
    path("logout/", views.logout, name="logout"),
    path("password/", views.password_change, name="password_change"),
    path("password/changed/", views.password_changed, name="password_changed"),
    path("tokens/", views.tokens, name="tokens"),
    path("time-zone/", views.time_zone, name="time_zone"),
    path("tokens/<int:token_id>/revoke/", views.revoke_token, name="revoke_token"),
]
