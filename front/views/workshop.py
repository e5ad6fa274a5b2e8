"""The workshop: units held or on the bench, and the recap list."""

from .. import selectors
from .access import page, technician_required


@technician_required
def workshop(request):
    return page(request, "front/workshop.html", {
        "workshop_units": list(selectors.units_in_workshop()),
        "recaps": list(selectors.recap_list()),
    })
