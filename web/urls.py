from django.contrib.auth import views as auth_views
from django.urls import path

from web import views

app_name = "web"
urlpatterns = [
    path("", views.source_list, name="sources"),
    path("sources/<slug:slug>/", views.source_detail, name="source"),
    path("upload/", views.upload_form, name="upload"),
    path("login/", auth_views.LoginView.as_view(template_name="web/login.html"), name="login"),
    path("logout/", auth_views.LogoutView.as_view(next_page="/login/"), name="logout"),
]
