"""E-mail notification of high-priority alarms (db/notify.py) against a real SMTP server.

The server is aiosmtpd's ``Controller`` on 127.0.0.1 (a free port), not a mock: the mails go
through ``smtplib`` and come back parsed with the standard library's ``email`` package. Flood
per EEMUA 191: more than 10 alarms in 10 minutes (seen, REFERENCES.md).
"""
from __future__ import annotations

import socket
import threading
from datetime import timedelta
from email import message_from_bytes, policy

import pytest
from aiosmtpd.controller import Controller
from aiosmtpd.smtp import AuthResult, LoginPassword

from db.feed_health import feed_health_frame
from db.notify import HEALTH_FEED, EmailNotifier, MailPlanner
from ops_logic.alarms.engine import FloodStatus
from ops_logic.alarms.states import AlarmEvent
from ops_logic.site import Notify, SiteConfigError, demo_site_path, parse_site
from tests.db.alarms.conftest import T0

SQLITE = pytest.mark.parametrize("db_engine", ["sqlite"], indirect=True)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Sink:
    """An aiosmtpd handler keeping every message."""

    def __init__(self):
        self.messages = []

    async def handle_DATA(self, server, session, envelope):  # noqa: N802 - aiosmtpd's name
        self.messages.append(message_from_bytes(envelope.content, policy=policy.default))
        return "250 OK"


@pytest.fixture
def smtp():
    sink = Sink()
    controller = Controller(sink, hostname="127.0.0.1", port=free_port())
    controller.start()
    yield sink, controller.port
    controller.stop()


def config(port: int, **extra) -> Notify:
    return Notify(host="127.0.0.1", port=port, from_="fishway-alarms@example.org",
                  to=["duty@example.org", "supervisor@example.org"], timeout_s=5.0, **extra)


def raised(key: str, minute: float, priority: int = 1, message: str = "") -> AlarmEvent:
    rule, where = key.split("@", 1)
    return AlarmEvent(T0 + timedelta(minutes=minute), key, rule, where.split(".", 1)[0],
                      "raised", "unacknowledged", "normal",
                      priority, 1.0, message=message or f"{key} beyond its limit",
                      annunciated=True)


@SQLITE
def test_a_high_priority_alarm_sends_one_mail(db_engine, demo_site, evaluator, feed, at, smtp):
    sink, port = smtp
    mailer = EmailNotifier(config(port), demo_site.site.name, engine=db_engine,
                           time_zone=demo_site.site.time_zone)
    evaluator.notifier = mailer
    for m in range(0, 6):  # oxygen at 3.5 mg/L from minute 0; 300 s on-delay
        feed(at(m), east__do=3.5)
        evaluator(at(m))
    assert mailer.flush(10)
    assert len(sink.messages) == 1  # do_low_low@east is the only high-priority one
    mail = sink.messages[0]
    assert mail["Subject"] == f"[{demo_site.site.name}] HIGH alarm: do_low_low@east"
    assert mail["To"] == "duty@example.org, supervisor@example.org"
    body = mail.get_content()
    assert "dissolved oxygen 3.5 mg/L (min 4 mg/L)" in body
    assert "2026-07-01 06:05:00 UTC (2026-06-30 22:05 local)" in body
    assert feed_health_frame(db_engine).loc[HEALTH_FEED, "last_success_at"] == at(5)
    # the oxygen recovers (300 s off-delay), falls again and re-annunciates at minute 17:
    # within the 30-minute rate limit, so no second mail
    for m in range(6, 12):
        feed(at(m))
        evaluator(at(m))
    again = []
    for m in range(12, 18):
        feed(at(m), east__do=3.5)
        again += evaluator(at(m))
    assert ("do_low_low@east", True) in {(e.key, e.annunciated) for e in again}
    assert mailer.flush(10)
    assert len(sink.messages) == 1 and mailer.planner.rate_limited == 1
    mailer.close()


def test_a_flood_sends_one_digest(smtp):
    sink, port = smtp
    mailer = EmailNotifier(config(port), "Demo site")
    flood = FloodStatus(True, T0, "pump_trip@east.PS1", 12, 12)
    burst = [raised(f"pump_trip@east.P{i}", 0.1 * i) for i in range(12)]
    assert mailer.notify(burst, T0 + timedelta(minutes=2), flood) == 1
    more = [raised("do_low_low@east", 3), raised("do_low_low@west", 3)]
    assert mailer.notify(more, T0 + timedelta(minutes=3), flood) == 0  # held for the next
    assert mailer.flush(10)
    assert len(sink.messages) == 1
    digest = sink.messages[0]
    assert digest["Subject"] == "[Demo site] 12 alarms (alarm flood)"
    body = digest.get_content()
    assert "First out: pump_trip@east.PS1 (12 alarms so far)" in body
    assert all(e.key in body for e in burst)
    # once the rate limit has passed the held alarms go out, as one digest
    later = T0 + timedelta(minutes=33)
    assert mailer.notify([], later, FloodStatus(False, None, None, 0, 0)) == 1
    assert mailer.flush(10)
    assert sink.messages[1]["Subject"] == "[Demo site] 2 alarms"
    assert "do_low_low@west" in sink.messages[1].get_content()
    mailer.close()


def test_only_high_priority_annunciations_are_mailed():
    planner = MailPlanner(Notify(host="h", from_="a@example.org", to=["b@example.org"]), "S")
    medium = raised("do_low@east", 0, priority=2)
    cleared = AlarmEvent(T0, "do_low_low@east", "do_low_low", "east", "cleared",
                         "rtn_unacknowledged", "unacknowledged", 1)
    suppressed_raise = AlarmEvent(T0, "do_low_low@west", "do_low_low", "west", "raised",
                                  "suppressed_by_design", "suppressed_by_design", 1)
    assert planner.plan([medium, cleared, suppressed_raise], T0) == []
    assert len(MailPlanner(Notify(host="h", from_="a@example.org", to=["b@example.org"],
                                  max_priority=2), "S").plan([medium], T0)) == 1
    four = [raised(f"do_low_low@f{i}", 0) for i in range(4)]  # more than digest_after = 3
    mails = planner.plan(four, T0)
    assert len(mails) == 1 and mails[0].digest and len(mails[0].keys) == 4


@SQLITE
def test_a_failing_server_is_shown_and_never_blocks(db_engine):
    port = free_port()
    release = threading.Event()
    listener = socket.socket()
    listener.bind(("127.0.0.1", port))
    listener.listen(1)

    def silent_server():  # accepts, says nothing until released, then hangs up
        conn, _ = listener.accept()
        release.wait(30)
        conn.close()
        listener.close()

    server = threading.Thread(target=silent_server, daemon=True)
    server.start()
    mailer = EmailNotifier(config(port), "Demo site", engine=db_engine)
    assert mailer.notify([raised("do_low_low@east", 0)], T0) == 1
    # notify has returned while the server has not even greeted: the sender waits, not us
    assert (mailer.sent, mailer.failed) == (0, 0)
    release.set()
    assert mailer.flush(10)
    assert (mailer.sent, mailer.failed) == (0, 1)
    row = feed_health_frame(db_engine).loc[HEALTH_FEED]
    assert row["last_error_at"] == T0 and "SMTPServerDisconnected" in row["last_error"]
    server.join(5)
    # a closed port: refused, reported the same way
    mailer.notify([raised("do_low_low@west", 1)], T0 + timedelta(minutes=1))
    assert mailer.flush(10) and mailer.failed == 2 and "Connection" in mailer.last_error
    mailer.close()


@pytest.mark.filterwarnings("ignore:Requiring AUTH while not requiring TLS")
def test_login_takes_the_password_from_the_environment(monkeypatch):
    sink = Sink()

    def authenticator(server, session, envelope, mechanism, auth_data):
        ok = isinstance(auth_data, LoginPassword) and (auth_data.login, auth_data.password) == (
            b"fishway", b"from-the-environment")
        return AuthResult(success=ok)

    controller = Controller(sink, hostname="127.0.0.1", port=free_port(),
                            authenticator=authenticator, auth_require_tls=False,
                            auth_required=True)
    controller.start()
    try:
        cfg = config(controller.port, username="fishway", password_env="FISHWAY_TEST_SMTP")
        mailer = EmailNotifier(cfg, "Demo site")
        mailer.notify([raised("do_low_low@east", 0)], T0)
        assert mailer.flush(10) and mailer.failed == 1
        assert "FISHWAY_TEST_SMTP" in mailer.last_error and not sink.messages
        monkeypatch.setenv("FISHWAY_TEST_SMTP", "from-the-environment")
        mailer.notify([raised("do_low_low@west", 0)], T0)
        assert mailer.flush(10) and mailer.sent == 1 and len(sink.messages) == 1
        mailer.close()
    finally:
        controller.stop()


def test_the_notify_section_of_a_site_file():
    import tomllib

    data = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))
    data["notify"] = {"host": "mail.example.org", "port": 587, "from": "alarms@example.org",
                      "to": ["duty@example.org"], "starttls": True, "username": "fishway",
                      "password_env": "FISHWAY_SMTP_PASSWORD"}
    n = parse_site(data).notify
    assert (n.host, n.port, n.from_, n.starttls, n.rate_limit_minutes) == (
        "mail.example.org", 587, "alarms@example.org", True, 30.0)
    del data["notify"]
    assert parse_site(data).notify is None
    data["notify"] = {"host": "h", "from": "a@example.org", "to": ["b@example.org"],
                      "password": "hunter2"}
    with pytest.raises(SiteConfigError) as err:
        parse_site(data)
    assert err.value.errors == [("notify", "no password in the site file: put it in an "
                                 "environment variable and name that variable in "
                                 "password_env")]


def test_the_evaluator_of_a_site_with_a_notify_section(db_engine, demo_site):
    from db.alarm.evaluator import alarm_evaluator

    assert alarm_evaluator(db_engine, demo_site).notifier is None  # the demo has none
    site = demo_site.model_copy(update={"notify": config(25)})
    ev = alarm_evaluator(db_engine, site)
    assert isinstance(ev.notifier, EmailNotifier) and ev.notifier.engine is db_engine
