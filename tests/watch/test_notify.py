"""Delivery of queued notifications (watch.notify): e-mail against a real SMTP server
(aiosmtpd on 127.0.0.1), webhooks against a local HTTP server, retries with backoff, grouping,
idempotency, reminders, and credentials that never reach the store or a log.

All network traffic stays on 127.0.0.1 (ports chosen by the OS). Time is a ManualClock.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import socket
import threading
from datetime import datetime, timedelta, timezone
from email import message_from_bytes
from email.policy import default as default_policy
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest
from aiosmtpd.controller import Controller
from aiosmtpd.smtp import AuthResult, LoginPassword
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from watch import notify
from watch.clock import ManualClock
from watch.errors import ConfigError
from watch.notify import (
    IDEMPOTENCY_HEADER,
    SIGNATURE_HEADER,
    deliver_pending,
    notify_settings,
    retry_failed,
)
from watch.workspace import init_workspace

START = datetime(2026, 1, 15, 6, 0, tzinfo=timezone.utc)
SMTP_USER = "duty-mailer"
SMTP_PASSWORD = "Pw-7q!unlikely-string-93jd"  # invented; must never reach the store or a log
WEBHOOK_SECRET = "whs-0f1e2d3c-unlikely"


# --- local receivers --------------------------------------------------------------------------


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class _MailHandler:
    def __init__(self):
        self.messages = []  # (envelope recipients, parsed message)
        self.reply = "250 OK"

    async def handle_DATA(self, server, session, envelope):
        if self.reply.startswith("250"):
            self.messages.append((list(envelope.rcpt_tos), message_from_bytes(envelope.content, policy=default_policy)))
        return self.reply


class _Authenticator:
    def __call__(self, server, session, envelope, mechanism, auth_data):
        ok = isinstance(auth_data, LoginPassword) and auth_data.login == SMTP_USER.encode() and (
            auth_data.password == SMTP_PASSWORD.encode()
        )
        return AuthResult(success=ok, handled=False)


@pytest.fixture
def smtp_server():
    handler = _MailHandler()
    controller = Controller(handler, hostname="127.0.0.1", port=_free_port(), authenticator=_Authenticator(),
                            auth_required=True, auth_require_tls=False)  # fmt: skip
    controller.start()
    yield controller, handler
    controller.stop()


class _Hook:
    """A webhook receiver: records requests; answers with ``status``."""

    def __init__(self):
        self.requests = []  # (headers dict, body bytes)
        self.status = 200
        hook = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self):
                body = self.rfile.read(int(self.headers["Content-Length"]))
                if hook.status == 200:
                    hook.requests.append((dict(self.headers), body))
                self.send_response(hook.status)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args):
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/hook"
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()

    def notifications(self) -> list[int]:
        return [n["outbox_id"] for _, body in self.requests for n in json.loads(body)["notifications"]]

    def close(self):
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def hook():
    receiver = _Hook()
    yield receiver
    receiver.close()


@pytest.fixture(autouse=True)
def _no_proxy(monkeypatch):
    # Requests to 127.0.0.1 must not be sent to a proxy named in the environment.
    for name in ("http_proxy", "https_proxy", "HTTP_PROXY", "HTTPS_PROXY", "all_proxy", "ALL_PROXY"):
        monkeypatch.delenv(name, raising=False)


# --- workspace and outbox ---------------------------------------------------------------------


def _workspace(tmp_path, notify_toml: str):
    ws = init_workspace(tmp_path / "ws")
    ws.site_file.write_text(ws.site_file.read_text() + "\n" + notify_toml, encoding="utf-8")
    return ws


def _email_toml(port: int, **extra) -> str:
    lines = [
        "[notify]",
        'log_file = "notifications.log"',
        *(f"{k} = {v}" for k, v in extra.items()),
        "[notify.email]",
        'host = "127.0.0.1"',
        f"port = {port}",
        'security = "none"',
        'sender = "slipwatch@fernhollow.invalid"',
        'user_env = "TEST_SMTP_USER"',
        'password_env = "TEST_SMTP_PASSWORD"',
        "unencrypted_login_to_local_relay = true",  # the test server has no certificate
        "[notify.email.recipients]",
        '"*" = ["records@fernhollow.invalid"]',
        'red = ["duty@fernhollow.invalid"]',
    ]
    return "\n".join(lines) + "\n"


def _hook_toml(url: str, levels=None, **extra) -> str:
    lines = ["[notify]", *(f"{k} = {v}" for k, v in extra.items()), "[[notify.webhook]]", 'name = "ops-board"',
             f'url = "{url}"', 'secret_env = "TEST_HOOK_SECRET"']  # fmt: skip
    if levels is not None:
        lines.append(f"levels = {json.dumps(levels)}")
    return "\n".join(lines) + "\n"


_next_alert = iter(range(1, 10_000))


def _alert(store, section="FH-010", rule="fos-red") -> int:
    with store.atomic():
        return store.conn.execute(
            "INSERT INTO alerts (section_id, rule, level, state, raised_utc, updated_utc) VALUES (?, ?, 'red', "
            "'firing', ?, ?) ON CONFLICT (section_id, rule) DO UPDATE SET state = 'firing' RETURNING id",
            (section, rule, "2026-01-15T06:00:00Z", "2026-01-15T06:00:00Z"),
        ).fetchone()[0]


def _outbox(store, kind="firing", level="red", alert_id=None, site="fernhollow", section="FH-010",
            created=START, key=None) -> int:  # fmt: skip
    key = key or f"{section}/rule/{next(_next_alert)}/{kind}"
    with store.atomic():
        return store.conn.execute(
            "INSERT INTO notification_outbox (idempotency_key, site_id, section_id, alert_id, kind, level, subject, "
            "body, payload_json, created_utc) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?) RETURNING id",
            (key, site, section, alert_id, kind, level, f"{section} {kind} at level {level}",
             f"Section {section}: factor of safety 1.08 and falling; check the crest for cracks.",
             json.dumps({"fos": 1.08}), created.strftime("%Y-%m-%dT%H:%M:%SZ")),
        ).fetchone()[0]  # fmt: skip


def _deliveries(store, channel=None) -> list[dict]:
    sql, params = "SELECT * FROM deliveries", []
    if channel:
        sql, params = sql + " WHERE channel = ?", [channel]
    return list(store.db.query(sql + " ORDER BY id", params))


def _attempts(store) -> list[dict]:
    return list(store.db.query("SELECT * FROM delivery_attempts ORDER BY id"))


# The test server takes AUTH without TLS (no certificate to hand); the client side is the same.
pytestmark = pytest.mark.filterwarnings("ignore:Requiring AUTH while not requiring TLS:UserWarning")

ENV = {"TEST_SMTP_USER": SMTP_USER, "TEST_SMTP_PASSWORD": SMTP_PASSWORD, "TEST_HOOK_SECRET": WEBHOOK_SECRET}


# --- configuration ----------------------------------------------------------------------------


def test_without_notify_table_only_the_log_is_written(tmp_path):
    ws = init_workspace(tmp_path / "ws")
    settings = notify_settings(ws.config(), ws.root)
    assert settings.email is None and settings.webhooks == ()
    assert settings.log_file == ws.root / "notifications.log"
    with ws.open_store() as store:
        _outbox(store)
        report = deliver_pending(ws, store, ManualClock(START), environ={})
        assert report.messages_sent == 1
        assert [d["channel"] for d in _deliveries(store)] == ["log"]
    text = (ws.root / "notifications.log").read_text()
    assert "FH-010 firing at level red" in text and "check the crest for cracks" in text


@pytest.mark.parametrize(
    "toml, match",
    [
        ("[notify]\ngroup_window_minutes = -1\n", "group_window_minutes.*>= 0"),
        ("[notify]\nmax_attempts = 0\n", "max_attempts.*>= 1"),
        ("[notify]\nretry_first_minutes = 10\nretry_max_minutes = 5\n", "retry_max_minutes"),
        ("[notify]\nrepeat_hours = 0\n", "repeat_hours.*> 0"),
        ("[notify]\nretries = 3\n", "'retries' is unknown"),
        ('[[notify.webhook]]\nname = "a"\nurl = "ftp://x"\n', "url.*http"),
        ('[[notify.webhook]]\nname = "a"\nurl = "http://x"\n[[notify.webhook]]\nname = "a"\nurl = "http://y"\n',
         "more than once"),
        ('[notify.email]\nhost = "h"\nsender = "a@b"\npassword_env = "P"\nuser_env = "U"\n', r"recipients\] is missing"),
        ('[notify.email]\nhost = "h"\nsender = "a@b"\npassword_env = "P"\n[notify.email.recipients]\nred = ["x@y"]\n',
         "user_env.*together"),
        ('[notify.email]\nhost = "h"\nsender = "a@b"\nuser_env = "U"\npassword_env = "s3cr3t pass!"\n'
         '[notify.email.recipients]\nred = ["x@y"]\n', "NAME of an environment variable"),
        ('[notify.email]\nhost = "h"\nsender = "a@b"\n[notify.email.recipients]\nred = "x@y"\n', "list of e-mail"),
    ],
)
def test_bad_notify_configuration_names_the_key(tmp_path, toml, match):
    ws = _workspace(tmp_path, toml)
    with pytest.raises(ConfigError, match=match):
        notify_settings(ws.config(), ws.root)


def test_secret_given_in_place_of_a_variable_name_is_not_echoed(tmp_path):
    ws = _workspace(tmp_path, '[[notify.webhook]]\nname = "a"\nurl = "http://x"\nsecret_env = "hunter2 hunter2"\n')
    with pytest.raises(ConfigError, match="secret_env") as caught:
        notify_settings(ws.config(), ws.root)
    assert "hunter2" not in str(caught.value)


def test_credentials_over_an_unencrypted_connection_are_refused_when_the_site_is_loaded(tmp_path):
    toml = _email_toml(2525).replace("unencrypted_login_to_local_relay = true\n", "")
    ws = _workspace(tmp_path, toml)
    with pytest.raises(ConfigError, match=r"security' 'none' with user_env/password_env would send .* unencrypted"):
        ws.config()  # every command loads the site this way
    # The owner's explicit consent for a local relay, as documented in docs/formats.md.
    ws.site_file.write_text(ws.site_file.read_text().replace(
        'password_env = "TEST_SMTP_PASSWORD"\n',
        'password_env = "TEST_SMTP_PASSWORD"\nunencrypted_login_to_local_relay = true\n'))  # fmt: skip
    assert notify_settings(ws.config(), ws.root).email.unencrypted_login_to_local_relay is True


class _EchoingAuthenticator:
    """A server that, refusing the login, quotes the base64 user name back (as some do)."""

    def __call__(self, server, session, envelope, mechanism, auth_data):
        echoed = base64.b64encode(SMTP_USER.encode()).decode()
        return AuthResult(success=False, handled=False, message=f"535 5.7.8 user {echoed} not accepted")


def test_server_replies_are_scrubbed_of_the_authentication_exchange(tmp_path):
    controller = Controller(_MailHandler(), hostname="127.0.0.1", port=_free_port(),
                            authenticator=_EchoingAuthenticator(), auth_required=True,
                            auth_require_tls=False)  # fmt: skip
    controller.start()
    try:
        ws = _workspace(tmp_path, _email_toml(controller.port, max_attempts=1))
        with ws.open_store() as store:
            _outbox(store)
            report = deliver_pending(ws, store, ManualClock(START), environ=ENV)
            errors = [a["error"] for a in _attempts(store) if a["status"] == "failed"]
            dump = "\n".join(store.conn.iterdump())
    finally:
        controller.stop()
    assert report.attempts_failed == 2 and all("SMTPAuthenticationError" in e for e in errors)  # two addresses
    assert all("user *** not accepted" in e for e in errors)  # the reply is kept, the credential cut out
    echoed = base64.b64encode(SMTP_USER.encode()).decode()
    for text in (dump, *(p.read_text(errors="replace") for p in ws.root.glob("*.log")), *report.errors,
                 *report.gave_up):  # fmt: skip
        assert echoed not in text and echoed.rstrip("=") not in text and SMTP_USER not in text


def test_backoff_doubles_up_to_its_cap():
    settings = notify.NotifySettings(log_file=None, retry_first=timedelta(minutes=1), retry_max=timedelta(minutes=10))
    waits = [settings.backoff(n).total_seconds() / 60 for n in range(1, 8)]
    assert waits == [1, 2, 4, 8, 10, 10, 10]


def test_missing_credential_variables_are_listed(tmp_path):
    ws = _workspace(tmp_path, _email_toml(25))
    settings = notify_settings(ws.config(), ws.root)
    assert notify.missing_credentials(settings, environ={"TEST_SMTP_USER": "u"}) == ["TEST_SMTP_PASSWORD"]


# --- e-mail -----------------------------------------------------------------------------------


def test_email_reaches_a_real_smtp_server_with_a_message_id_from_the_key(tmp_path, smtp_server):
    controller, mailbox = smtp_server
    ws = _workspace(tmp_path, _email_toml(controller.port))
    clock = ManualClock(START)
    with ws.open_store() as store:
        outbox_id = _outbox(store, level="red")
        report = deliver_pending(ws, store, clock, environ=ENV)
        assert report.errors == [] and report.messages_sent == 3  # log, records@, duty@
        emails = _deliveries(store, "email")
        assert sorted(d["recipient"] for d in emails) == ["duty@fernhollow.invalid", "records@fernhollow.invalid"]
        assert all(d["status"] == "sent" and d["attempts"] == 1 for d in emails)
        assert {a["status"] for a in _attempts(store)} == {"sent"}
    assert sorted(rcpt for rcpts, _ in mailbox.messages for rcpt in rcpts) == [
        "duty@fernhollow.invalid", "records@fernhollow.invalid"]  # fmt: skip
    for (rcpts,), mail in ((r, m) for r, m in mailbox.messages):
        delivery = next(d for d in emails if d["recipient"] == rcpts)
        assert mail["Message-ID"] == f"<{delivery['message_key']}@fernhollow.invalid>"
        assert mail[IDEMPOTENCY_HEADER] == delivery["message_key"]
        assert "FH-010 firing at level red" in mail["Subject"]
        assert "check the crest for cracks" in mail.get_content()
        assert delivery["outbox_id"] == outbox_id


def test_credentials_never_reach_the_store_or_the_logs(tmp_path, smtp_server):
    controller, mailbox = smtp_server
    ws = _workspace(tmp_path, _email_toml(controller.port, max_attempts=1))
    wrong = {**ENV, "TEST_SMTP_PASSWORD": SMTP_PASSWORD + "-wrong"}
    with ws.open_store() as store:
        _outbox(store)
        report = deliver_pending(ws, store, ManualClock(START), environ=wrong)
        assert report.attempts_failed == 2 and len(report.gave_up) == 2
        errors = [a["error"] for a in _attempts(store) if a["status"] == "failed"]
        assert all("SMTPAuthenticationError" in e for e in errors)
        retry_failed(store, ManualClock(START))
        assert deliver_pending(ws, store, ManualClock(START), environ=ENV).messages_sent == 2
        dump = "\n".join(store.conn.iterdump())
    assert len(mailbox.messages) == 2
    plain = f"\0{SMTP_USER}\0{SMTP_PASSWORD}"
    texts = [dump, *(p.read_text(errors="replace") for p in ws.root.glob("*.log"))]
    for secret in (SMTP_PASSWORD, SMTP_PASSWORD + "-wrong", base64.b64encode(plain.encode()).decode(),
                   base64.b64encode(SMTP_PASSWORD.encode()).decode()):  # fmt: skip
        assert all(secret not in text for text in texts)


def test_smtp_server_down_is_retried_and_nothing_is_lost(tmp_path):
    handler = _MailHandler()
    port = _free_port()
    ws = _workspace(tmp_path, _email_toml(port, retry_first_minutes=1, timeout_seconds=5))
    clock = ManualClock(START)
    with ws.open_store() as store:
        first = _outbox(store, level="amber")  # "*" recipient only
        report = deliver_pending(ws, store, clock, environ=ENV)
        assert report.attempts_failed == 1 and "ConnectionRefusedError" in report.errors[0]
        clock.advance(timedelta(minutes=10))
        second = _outbox(store, level="amber", created=clock.now())
        controller = Controller(handler, hostname="127.0.0.1", port=port, authenticator=_Authenticator(),
                                auth_required=True, auth_require_tls=False)  # fmt: skip
        controller.start()
        try:
            clock.advance(timedelta(minutes=1))
            report = deliver_pending(ws, store, clock, environ=ENV)
        finally:
            controller.stop()
        # the waiting e-mail, a new one for the second row, and the second row's log entry
        assert report.attempts_failed == 0 and report.messages_sent == 3 and report.waiting == 0
        attempts = [(a["status"], a["attempt"]) for a in _attempts(store) if a["channel"] == "email"]
        assert attempts == [("failed", 1), ("sent", 2), ("sent", 1)]
    bodies = [m.get_content() for _, m in handler.messages]
    assert len(bodies) == 2 and "amber" in bodies[0] and first < second


# --- webhooks ---------------------------------------------------------------------------------


def test_webhook_post_is_signed_and_carries_the_key(tmp_path, hook):
    ws = _workspace(tmp_path, _hook_toml(hook.url))
    with ws.open_store() as store:
        outbox_id = _outbox(store)
        assert deliver_pending(ws, store, ManualClock(START), environ=ENV).messages_sent == 2
        key = _deliveries(store, "webhook")[0]["message_key"]
    (headers, body), = hook.requests
    expected = "hmac-sha256=" + hmac.new(WEBHOOK_SECRET.encode(), body, hashlib.sha256).hexdigest()
    assert headers[SIGNATURE_HEADER] == expected
    assert headers[IDEMPOTENCY_HEADER] == key
    payload = json.loads(body)
    assert payload["message_key"] == key and payload["site"]["id"] == "fernhollow"
    (item,) = payload["notifications"]
    assert (item["outbox_id"], item["kind"], item["level"], item["details"]) == (outbox_id, "firing", "red", {"fos": 1.08})


def test_failing_webhook_is_retried_with_backoff_then_everything_arrives_once(tmp_path, hook):
    ws = _workspace(tmp_path, _hook_toml(hook.url, retry_first_minutes=2, retry_max_minutes=8, group_window_minutes=5))
    clock = ManualClock(START)
    hook.status = 503
    sent = []
    with ws.open_store() as store:
        sent.append(_outbox(store))
        deliver_pending(ws, store, clock, environ=ENV)  # attempt 1 fails: next in 2 min
        clock.advance(timedelta(minutes=1))
        report = deliver_pending(ws, store, clock, environ=ENV)
        assert report.attempts_failed == 0  # still backing off
        clock.advance(timedelta(minutes=1))
        assert deliver_pending(ws, store, clock, environ=ENV).attempts_failed == 1  # attempt 2: next in 4 min
        sent.append(_outbox(store, kind="resolved", created=clock.now()))
        for _ in range(6):  # more outage: more rows, more failed attempts, doubling waits up to 8 min
            clock.advance(timedelta(minutes=5))
            deliver_pending(ws, store, clock, environ=ENV)
        failed = [a for a in _attempts(store) if a["channel"] == "webhook"]
        assert all(a["status"] == "failed" and "HTTP 503" in a["error"] for a in failed)
        first_key = failed[0]["message_key"]
        times = [datetime.fromisoformat(a["time_utc"]) for a in failed if a["message_key"] == first_key]
        gaps = [(b - a).total_seconds() / 60 for a, b in zip(times, times[1:])]
        # waits of 2, 4, 8 and 8 minutes (capped), seen by calls at minutes 0, 1, 2, 7, 12, ... 32
        assert gaps == [2, 5, 10, 10]
        hook.status = 200
        clock.advance(timedelta(minutes=10))
        report = deliver_pending(ws, store, clock, environ=ENV)
        assert report.attempts_failed == 0 and report.waiting == 0
        assert {d["status"] for d in _deliveries(store)} == {"sent"}
    assert sorted(hook.notifications()) == sorted(sent)  # each row once, none lost


def test_a_retry_resends_the_same_message_under_the_same_key(tmp_path, hook, monkeypatch):
    # A crash between the send and its record: the receiver got the message, the store does
    # not know. The next call sends it again with the same key, so the receiver can drop it.
    ws = _workspace(tmp_path, _hook_toml(hook.url))
    with ws.open_store() as store:
        _outbox(store)
        original = store.record_delivery_attempt

        def crash(*args, **kwargs):
            if args[1] == "webhook":
                raise RuntimeError("power cut")
            return original(*args, **kwargs)

        monkeypatch.setattr(store, "record_delivery_attempt", crash)
        with pytest.raises(RuntimeError, match="power cut"):
            deliver_pending(ws, store, ManualClock(START), environ=ENV)
        monkeypatch.setattr(store, "record_delivery_attempt", original)
        deliver_pending(ws, store, ManualClock(START), environ=ENV)
    (h1, b1), (h2, b2) = hook.requests
    assert h1[IDEMPOTENCY_HEADER] == h2[IDEMPOTENCY_HEADER] and b1 == b2


def test_webhook_levels_filter_but_resolved_follows_the_firing(tmp_path, hook):
    ws = _workspace(tmp_path, _hook_toml(hook.url, levels=["red"]))
    with ws.open_store() as store:
        alert = _alert(store)
        firing = _outbox(store, level="red", alert_id=alert)
        amber = _outbox(store, level="amber", section="FH-020")  # not for this webhook
        resolved = _outbox(store, kind="resolved", level=None, alert_id=alert)  # no level on the row
        clock = ManualClock(START)
        deliver_pending(ws, store, clock, environ=ENV)
        clock.advance(timedelta(minutes=5))
        deliver_pending(ws, store, clock, environ=ENV)
        logged = {d["outbox_id"] for d in _deliveries(store, "log")}
    assert sorted(hook.notifications()) == [firing, resolved]
    assert logged == {firing, amber, resolved}  # the log gets everything


# --- grouping ---------------------------------------------------------------------------------


def test_a_storm_is_grouped_into_one_message_per_receiver_and_window(tmp_path, hook):
    ws = _workspace(tmp_path, _hook_toml(hook.url, group_window_minutes=5))
    clock = ManualClock(START)
    with ws.open_store() as store:
        storm = [_outbox(store, section=f"FH-{i:03d}") for i in range(40)]
        deliver_pending(ws, store, clock, environ=ENV)
        assert len(hook.requests) == 1 and sorted(hook.notifications()) == storm
        clock.advance(timedelta(minutes=1))
        late = [_outbox(store, created=clock.now()), _outbox(store, created=clock.now())]
        deliver_pending(ws, store, clock, environ=ENV)
        assert len(hook.requests) == 1  # inside the window: held back
        clock.advance(timedelta(minutes=4))
        deliver_pending(ws, store, clock, environ=ENV)
        assert len(hook.requests) == 2 and hook.notifications()[40:] == late
        other_site = _outbox(store, site="brackenfold")  # another site never shares a message
        clock.advance(timedelta(minutes=1))
        deliver_pending(ws, store, clock, environ=ENV)
        assert len(hook.requests) == 3 and hook.notifications()[42:] == [other_site]
        log_text = (ws.root / "notifications.log").read_text()
    assert json.loads(hook.requests[0][1])["summary"] == "[slipwatch fernhollow] 40 notifications: firing 40"
    assert "40 notifications (firing 40), grouped within 5 minutes" in log_text
    assert "1 of 40: FIRING, level red, section FH-000, raised 2026-01-15 06:00 UTC" in log_text


# --- give up, retry, reminders ----------------------------------------------------------------


def test_after_max_attempts_a_message_is_given_up_loudly_and_can_be_retried(tmp_path, hook):
    ws = _workspace(tmp_path, _hook_toml(hook.url, max_attempts=2, retry_first_minutes=1))
    clock = ManualClock(START)
    hook.status = 500
    with ws.open_store() as store:
        outbox_id = _outbox(store)
        deliver_pending(ws, store, clock, environ=ENV)
        clock.advance(timedelta(minutes=1))
        report = deliver_pending(ws, store, clock, environ=ENV)
        assert len(report.gave_up) == 1 and "HTTP 500" in report.gave_up[0]
        assert _deliveries(store, "webhook")[0]["status"] == "failed"
        clock.advance(timedelta(hours=5))
        assert deliver_pending(ws, store, clock, environ=ENV).attempts_failed == 0  # no more tries
        assert "DELIVERY GIVEN UP" in (ws.root / "notifications.log").read_text()
        hook.status = 200
        assert retry_failed(store, clock) == 1
        assert deliver_pending(ws, store, clock, environ=ENV).messages_sent == 1
    assert hook.notifications() == [outbox_id]


def test_missing_secret_variable_is_a_recorded_failure_not_a_crash(tmp_path, hook):
    ws = _workspace(tmp_path, _hook_toml(hook.url))
    with ws.open_store() as store:
        _outbox(store)
        report = deliver_pending(ws, store, ManualClock(START), environ={})
        assert report.attempts_failed == 1
        assert "environment variable TEST_HOOK_SECRET" in _attempts(store)[-1]["error"]
    assert hook.requests == []


def test_standing_alarm_reminders_stop_when_resolved(tmp_path, hook):
    ws = _workspace(tmp_path, _hook_toml(hook.url, repeat_hours=2))
    clock = ManualClock(START)
    with ws.open_store() as store:
        alert = _alert(store)
        firing = _outbox(store, alert_id=alert)
        deliver_pending(ws, store, clock, environ=ENV)
        clock.advance(timedelta(hours=1))
        assert deliver_pending(ws, store, clock, environ=ENV).reminders_created == 0
        clock.advance(timedelta(hours=1))
        report = deliver_pending(ws, store, clock, environ=ENV)
        assert report.reminders_created == 2  # log and webhook
        _outbox(store, kind="inspection", alert_id=alert, created=clock.now())  # not a change of state
        clock.advance(timedelta(hours=2))
        assert deliver_pending(ws, store, clock, environ=ENV).reminders_created == 2
        with store.atomic():  # acknowledged in this episode: no more reminders
            store.conn.execute("UPDATE alerts SET acknowledged_episode = episode WHERE id = ?", (alert,))
        clock.advance(timedelta(hours=2))
        assert deliver_pending(ws, store, clock, environ=ENV).reminders_created == 0
        with store.atomic():  # a new episode, not acknowledged: reminders again
            store.conn.execute("UPDATE alerts SET episode = episode + 1 WHERE id = ?", (alert,))
        clock.advance(timedelta(minutes=5))
        assert deliver_pending(ws, store, clock, environ=ENV).reminders_created == 2
        with store.atomic():
            store.conn.execute("UPDATE alerts SET state = 'resolved' WHERE id = ?", (alert,))
        resolved = _outbox(store, kind="resolved", alert_id=alert, created=clock.now())
        clock.advance(timedelta(hours=3))
        report = deliver_pending(ws, store, clock, environ=ENV)
        assert report.reminders_created == 0
    requests = [[(n["outbox_id"], n["kind"], n["reminder"]) for n in json.loads(b)["notifications"]]
                for _, b in hook.requests]  # fmt: skip
    assert requests == [
        [(firing, "firing", 0)],
        [(firing, "firing", 1)],
        [(firing, "firing", 2), (firing + 1, "inspection", 0)],  # due together: one message
        [(firing, "firing", 3)],
        [(resolved, "resolved", 0)],
    ]


# --- invariant: whatever the outages, every row arrives exactly once --------------------------


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(st.integers(0, 3), st.booleans(), st.integers(0, 20)), min_size=1, max_size=12))
def test_every_row_is_delivered_exactly_once_whatever_the_outages(tmp_path_factory, monkeypatch, steps):
    # steps: (new rows, receiver up?, minutes to wait). A fake webhook sender stands in for
    # the network; the property is about queueing, grouping, backoff and recording.
    ws = _workspace(tmp_path_factory.mktemp("p"), "[notify]\nmax_attempts = 1000\n[[notify.webhook]]\n"
                    'name = "fake"\nurl = "http://127.0.0.1:9/"\n')  # fmt: skip
    received: list[int] = []
    state = {"up": True}

    def fake_send(message, hook, timeout, environ):
        if not state["up"]:
            raise OSError("receiver down")
        received.extend(n["outbox_id"] for n in message.payload["notifications"])

    monkeypatch.setattr(notify, "_send_webhook", fake_send)
    clock = ManualClock(START)
    queued = []
    with ws.open_store() as store:
        for new_rows, up, minutes in steps:
            queued += [_outbox(store, created=clock.now()) for _ in range(new_rows)]
            state["up"] = up
            deliver_pending(ws, store, clock, environ={})
            assert len(received) == len(set(received))  # never twice
            clock.advance(timedelta(minutes=minutes))
        state["up"] = True
        clock.advance(timedelta(hours=2))  # past any backoff (cap 60 min) and grouping window
        deliver_pending(ws, store, clock, environ={})
        clock.advance(timedelta(hours=2))
        deliver_pending(ws, store, clock, environ={})
    assert sorted(received) == sorted(queued)
