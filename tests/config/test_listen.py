"""``metrics.listen`` and ``serve`` keys: addresses, ports and the token, with file/line errors."""

from __future__ import annotations

import pytest

from watcher.config import Listen, load_config_text
from watcher.errors import ConfigError


def test_listen_reads_host_and_port() -> None:
    """ "HOST:PORT" gives the address; [::1] is IPv6; both default off / 127.0.0.1:8470."""
    config = load_config_text(
        'metrics:\n  listen: "127.0.0.1:9464"\nserve:\n  listen: "[::1]:8080"\n',
        source="lab.yaml",
    )
    assert config.metrics.listen == Listen(host="127.0.0.1", port=9464)
    assert config.serve.listen == Listen(host="::1", port=8080)
    assert config.serve.listen.is_loopback
    assert str(config.serve.listen) == "[::1]:8080"
    default = load_config_text("instrument: {name: x}\n", source="lab.yaml")
    assert default.metrics.listen is None
    assert str(default.serve.listen) == "127.0.0.1:8470"
    assert default.serve.token is None
    assert not Listen(host="0.0.0.0", port=1).is_loopback


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ('metrics:\n  listen: "9464"\n', 'expected "HOST:PORT"'),
        ('metrics:\n  listen: "metrics.lab:9464"\n', "must be an IP address or localhost"),
        ('metrics:\n  listen: "127.0.0.1:http"\n', "the port must be a number"),
        ('metrics:\n  listen: "127.0.0.1:0"\n', "an integer >= 1, got 0"),
        ('metrics:\n  listen: "127.0.0.1:70000"\n', "70000"),
        ("metrics:\n  listen: 9464\n", "expected non-empty text"),
        ("metrics:\n  lisen: x\n", "did you mean 'listen'"),
        ('serve:\n  token: "short"\n', "at least 16 characters"),
        ("serve:\n  refresh_s: 0\n", "a duration > 0"),
    ],
)
def test_bad_listen_and_serve_values_name_file_line_and_key(text: str, fragment: str) -> None:
    """Each mistake is one problem naming lab.yaml, line 2 and the key; a token is never quoted."""
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, source="lab.yaml")
    message = str(caught.value)
    assert message.startswith("lab.yaml:2: "), message
    assert fragment in message
    assert "short" not in message.split(":", 2)[2] or "token" not in text
