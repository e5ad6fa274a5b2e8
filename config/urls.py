from django.contrib import admin
from django.urls import include, path

urlpatterns = [
    path("admin/", admin.site.urls),
    path("accounts/", include("django.contrib.auth.urls")),
    path("", include("front.urls")),
]

# A database too busy to take a write answers "try again" (503), not a server error.
handler500 = "front.views.errors.server_error_or_busy"
