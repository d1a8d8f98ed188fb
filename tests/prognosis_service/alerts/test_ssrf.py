"""The webhook target guard (server-side request forgery)."""

from __future__ import annotations

import pytest

from prognosis_service.alerts.ssrf import TargetPolicy, TargetRefusedError, check_target


def fixed(*addresses: str):  # a resolver that answers from a table
    return lambda host, port: list(addresses)


@pytest.mark.parametrize(
    "host",
    [
        "10.0.0.1",
        "192.168.1.1",
        "172.16.5.4",
        "127.0.0.1",
        "169.254.169.254",  # cloud metadata address (link-local)
        "100.64.0.1",  # shared address space
        "0.0.0.0",
        "224.0.0.1",
        "240.0.0.1",
        "198.51.100.7",  # documentation range
        "[::1]",
        "[fd00::1]",
        "[fe80::1]",
        "[::]",
        "[ff02::1]",
        "[::ffff:127.0.0.1]",
        "[::ffff:10.0.0.1]",
        "[64:ff9b::a00:1]",  # NAT64 of 10.0.0.1
        "[2002:a00:1::]",  # 6to4 of 10.0.0.1
    ],
)
def test_private_and_special_literals_are_refused(host: str) -> None:
    with pytest.raises(TargetRefusedError) as info:
        check_target(f"https://{host}/hook", TargetPolicy())
    assert info.value.reason == "address"


def test_localhost_name_is_refused_with_the_system_resolver() -> None:
    with pytest.raises(TargetRefusedError, match="loopback") as info:
        check_target("https://localhost:8443/hook", TargetPolicy())
    assert info.value.reason == "address"


def test_a_name_is_refused_when_any_address_is_private() -> None:
    policy = TargetPolicy(resolver=fixed("8.8.8.8", "127.0.0.1"))
    with pytest.raises(TargetRefusedError, match=r"127\.0\.0\.1"):
        check_target("https://dispatch.saltbush.example/hook", policy)


def test_public_targets_are_accepted() -> None:
    t = check_target("https://8.8.8.8/hook", TargetPolicy())
    assert (t.address, t.port, t.pinned_url()) == ("8.8.8.8", 443, "https://8.8.8.8:443/hook")
    t6 = check_target("https://[2001:4860:4860::8888]:8443/h?x=1", TargetPolicy())
    assert t6.pinned_url() == "https://[2001:4860:4860::8888]:8443/h?x=1"
    named = check_target(
        "https://dispatch.saltbush.example/hook", TargetPolicy(resolver=fixed("8.8.4.4"))
    )
    assert named.address == "8.8.4.4"
    assert named.host_header == "dispatch.saltbush.example"


def test_scheme_credentials_and_ports() -> None:
    with pytest.raises(TargetRefusedError, match="scheme must be one of") as info:
        check_target("http://8.8.8.8/hook", TargetPolicy())
    assert info.value.reason == "scheme"
    assert check_target("http://8.8.8.8/hook", TargetPolicy(allow_http=True)).port == 80
    with pytest.raises(TargetRefusedError, match="credentials"):
        check_target("https://user:pw@8.8.8.8/hook", TargetPolicy())
    with pytest.raises(TargetRefusedError, match="port must be one of"):
        check_target("https://8.8.8.8:8443/hook", TargetPolicy(allowed_ports=(443,)))
    with pytest.raises(TargetRefusedError) as bad:
        check_target("ftp://8.8.8.8/x", TargetPolicy())
    assert bad.value.reason == "scheme"


def test_on_premise_allowances() -> None:
    assert check_target("https://10.20.1.5/hook", TargetPolicy(allowed_networks=("10.20.0.0/16",)))
    with pytest.raises(TargetRefusedError):
        check_target("https://10.21.1.5/hook", TargetPolicy(allowed_networks=("10.20.0.0/16",)))
    assert check_target(
        "http://127.0.0.1:9/x", TargetPolicy(allow_private_targets=True, allow_http=True)
    )


def test_unresolvable_name() -> None:
    with pytest.raises(TargetRefusedError) as info:
        check_target("https://no-such-host.invalid/hook", TargetPolicy())
    assert info.value.reason == "unresolvable"
