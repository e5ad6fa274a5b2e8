"""What every page's frame needs: which role's links to show.  A context
processor, so the app's own 404 and 403 pages carry the same top bar."""

from fleet.roles import DESK, MANAGER, ROLE_LABELS, ROLES, TECHNICIAN, user_roles


def roles(request):
    user = getattr(request, "user", None)
    if user is None or not user.is_authenticated:
        return {"is_desk": False, "is_technician": False, "is_manager": False, "role_names": []}
    held = user_roles(user)
    return {
        "is_desk": bool(held & {DESK, MANAGER}),
        "is_technician": bool(held & {TECHNICIAN, MANAGER}),
        "is_manager": MANAGER in held,
        "role_names": [ROLE_LABELS[r] for r in ROLES if r in held],
    }
