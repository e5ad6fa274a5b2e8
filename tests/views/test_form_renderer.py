"""The app's forms are drawn by Django's Jinja2 form renderer
(``front.forms.FORM_RENDERER``, for speed on the desk's pages): every form's
labels, widgets, errors and whole-form rendering must come out as Django's
own template renderer draws them (the reference here: Django's
``django.forms.renderers.DjangoTemplates`` and its widget templates), the
same HTML by Django's own comparison (``django.test.html.parse_html``, as
``assertHTMLEqual``: the two template languages differ only in blank space
between tags and in how an apostrophe is escaped), and the desk's two forms
character for character."""

import pytest
from django.forms.renderers import DjangoTemplates, Jinja2
from django.test.html import parse_html

from fleet.models import UnitCapacitor
from front import bench_forms, forms as front_forms
from front.forms import FORM_RENDERER, PlainForm
from tests.base import build_fleet

REFERENCE = DjangoTemplates()


def _all_forms():
    found, todo = [], [PlainForm]
    while todo:
        cls = todo.pop()
        found.append(cls)
        todo.extend(cls.__subclasses__())
    return found


def _kwargs(cls, fleet):
    if cls is bench_forms.RecapChoiceForm:
        return {"roles": [("reservoir", "Reservoir")], "designators": ["C1", "C2"]}
    if cls is bench_forms.RecapForm:
        caps = list(UnitCapacitor.objects.select_related("position").filter(unit=fleet.unit))
        return {"caps": caps, "suggestions": {caps[0].position.designator: {"capacitance_uf": 470.0}}}
    return {}


def _drawn(form):
    """Everything a page draws of ``form``: each field's label, widget, errors
    and help, the non-field errors, and the whole form as Django lays it out."""
    parts = [str(form.non_field_errors()), form.as_div(), form.as_p()]
    for bound in form:
        parts += [str(bound.label_tag()), str(bound), str(bound.errors), str(bound.help_text or "")]
    return parts


def test_the_app_forms_use_the_jinja2_renderer():
    assert isinstance(FORM_RENDERER, Jinja2)
    assert front_forms.CheckInForm().renderer is FORM_RENDERER
    assert len(_all_forms()) >= 12  # the desk's, the bench's, the lists' filters, the people's, the import's


@pytest.mark.parametrize("bound", [False, True], ids=["empty", "posted-with-errors"])
def test_every_form_draws_the_same_html_as_djangos_template_renderer(db, bound):
    fleet = build_fleet()
    checked = 0
    for cls in _all_forms():
        # A posted form with bad values, so that errors are drawn too.
        data = {name: "not a number" for name in cls.base_fields} if bound else None
        kwargs = _kwargs(cls, fleet)
        ours = cls(data, **kwargs) if bound else cls(**kwargs)
        reference = cls(data, renderer=REFERENCE, **kwargs) if bound else cls(renderer=REFERENCE, **kwargs)
        for form in (ours, reference):
            if hasattr(form, "focus"):
                form.focus()
            if bound:
                form.is_valid()
        assert ours.renderer is FORM_RENDERER and reference.renderer is REFERENCE
        drawn, expected = _drawn(ours), _drawn(reference)
        assert [parse_html(x) for x in drawn] == [parse_html(x) for x in expected], cls.__name__
        if cls in (front_forms.CheckInForm, front_forms.CheckOutForm):
            assert drawn == expected, cls.__name__
        checked += 1
    assert checked == len(_all_forms())
