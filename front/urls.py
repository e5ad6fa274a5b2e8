from django.urls import path

from . import views

urlpatterns = [
    path("", views.home, name="home"),
    path("units/", views.unit_list, name="unit_list"),
    path("units/<str:asset_tag>/", views.unit_detail, name="unit_detail"),
    path("units/<str:asset_tag>/service-sheet.pdf", views.unit_sheet, name="unit_sheet"),
    path("desk/scan/", views.desk_scan, name="desk_scan"),
    path("desk/check-out/", views.check_out, name="check_out"),
    path("desk/check-in/", views.check_in, name="check_in"),
    path("workshop/", views.workshop, name="workshop"),
    path("workshop/due-list.pdf", views.due_list, name="due_list_pdf"),
    path("workshop/parts-list.<str:fmt>", views.parts_list, name="parts_list"),
    path("bench/<str:asset_tag>/", views.bench_unit, name="bench_unit"),
    path("bench/<str:asset_tag>/intake/", views.bench_intake, name="bench_intake"),
    path("bench/<str:asset_tag>/reading/", views.bench_reading, name="bench_reading"),
    path("bench/<str:asset_tag>/recap/", views.bench_recap, name="bench_recap"),
    path("bench/<str:asset_tag>/release/", views.bench_release, name="bench_release"),
    path("workshop/sheets/", views.sheet_batches, name="sheet_batches"),
    path("workshop/sheets/<int:pk>/", views.sheet_batch, name="sheet_batch"),
    path("workshop/sheets/<int:pk>/sheets.pdf", views.sheet_batch_pdf, name="sheet_batch_pdf"),
    path("digest/", views.digest_settings, name="digest_settings"),
    path("digest/send-now/", views.digest_send_now, name="digest_send_now"),
    path("digest/unsubscribe/<str:token>/", views.digest_unsubscribe, name="digest_unsubscribe"),
    path("data/import/", views.csv_import, name="csv_import"),
    path("data/export/<slug:kind>.csv", views.csv_export, name="csv_export"),
    path("data/import/jobs/<int:pk>/", views.import_job, name="import_job"),
    path("people/", views.people_list, name="people"),
    path("people/new/", views.person_new, name="person_new"),
    path("people/<int:pk>/", views.person_edit, name="person_edit"),
]
