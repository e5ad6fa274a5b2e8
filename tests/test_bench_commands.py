"""The bench commands: each page action's twin for scripts, calling the same
workflow; a one-line message and a non-zero exit for what cannot be done."""

from io import StringIO

import pytest
from django.core.management import CommandError, call_command, execute_from_command_line

from fleet.models import BenchVisit, Reading, Unit
from tests.base import make_user
from tests.test_bench_loop import unit  # noqa: F401  (a unit with a charge pump)


def run(*args):
    out = StringIO()
    call_command(*args, stdout=out)
    return out.getvalue()


def test_the_loop_by_command(unit):
    tech = make_user("technician", "ivo.tech")
    Unit.objects.filter(pk=unit.pk).update(status="hold")
    assert "EC-0001 is on the bench" in run("bench_intake", "ec-0001", "--notes", "No effect", "--technician",
                                            "ivo.tech")
    out = run("record_reading", "EC-0001", "--position", "C4", "--esr-ohm", "14", "--capacitance", "8u2")
    assert "C4: ESR 14 Ω measured" in out and "damage C4" in out
    out = run("record_reading", "EC-0001", "--rail=-5V", "--volts", "-2.1", "--load-ma", "20")
    assert "-5V rail: predicted −" in out and "measured −2.1 V under 20 mA: low" in out
    assert "damage C4" in out and "C5" in out
    out = run("recap", "EC-0001", "--positions", "C4,C5", "--technician", "ivo.tech")
    assert "recap recorded (C4, C5), signed off by ivo.tech" in out
    assert "released" in run("release", "EC-0001")
    unit.refresh_from_db()
    assert unit.status == "available"
    assert BenchVisit.objects.get().opened_by == tech
    assert Reading.objects.filter(part_removed=True).count() == 2  # the pump's readings are findings now


@pytest.mark.parametrize("args, words", [
    (("bench_intake", "NOPE-1"), "No unit has the asset tag 'NOPE-1'"),
    (("record_reading", "EC-0001", "--position", "C99", "--esr-ohm", "3"), "has no position C99"),
    (("record_reading", "EC-0001", "--position", "C4", "--esr-ohm", "-3"), "above zero"),
    (("record_reading", "EC-0001", "--position", "C4", "--capacitance", "40"), "far above"),
    (("record_reading", "EC-0001", "--position", "C4", "--capacitance", "4x7"), "--capacitance"),
    (("record_reading", "EC-0001", "--rail=-5V", "--volts", "4.2", "--load-ma", "20"), "wrong sign"),
    (("recap", "EC-0001", "--positions", "C4,C77"), "has no position C77"),
    (("recap", "EC-0001", "--all-electrolytics", "--technician", "nobody"), "No user is called 'nobody'"),
    (("release", "NOPE-2"), "No unit has the asset tag 'NOPE-2'"),
])
def test_what_cannot_be_done_is_one_line(unit, args, words):
    Unit.objects.filter(pk=unit.pk).update(status="bench")
    with pytest.raises(CommandError) as caught:
        run(*args)
    assert words in str(caught.value)
    assert "\n" not in str(caught.value)
    assert not Reading.objects.exists()


def test_a_refusal_exits_non_zero(unit, capsys):
    with pytest.raises(SystemExit) as caught:
        execute_from_command_line(["manage.py", "release", "EC-0001"])
    assert caught.value.code == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith("CommandError: EC-0001 is available, not on the bench") and "\n" not in err
