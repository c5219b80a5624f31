"""Which callback URLs a batch may name, checked at submission and again at delivery.

Only http(s). The host is resolved and every address it resolves to must be
acceptable: link-local and cloud metadata addresses (169.254.169.254,
fd00:ec2::254) never are, nor multicast, unspecified or reserved ones; loopback,
private and shared (CGNAT) ranges only when `allow_private` is set. The check
runs again just before each delivery, and the delivery connects to the address
that passed, so a DNS answer that changes in between (rebinding) cannot steer
the POST to an internal service.
"""

from __future__ import annotations

import ipaddress
import socket
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from urllib.parse import SplitResult, urlsplit

IPAddress = ipaddress.IPv4Address | ipaddress.IPv6Address
Resolver = Callable[[str, int], Sequence[str]]

MAX_URL_CHARS = 2000
METADATA_ADDRESSES = frozenset(
    {ipaddress.ip_address("169.254.169.254"), ipaddress.ip_address("fd00:ec2::254")}
)


class WebhookUrlRefused(ValueError):
    """The URL may not receive webhooks; the message says why. `transient` when the
    host merely failed to resolve (worth retrying at delivery time)."""

    def __init__(self, message: str, *, transient: bool = False) -> None:
        super().__init__(message)
        self.transient = transient


@dataclass(frozen=True)
class CheckedUrl:
    """A URL that passed, with the addresses it resolved to (connect to one of these)."""

    url: str
    parts: SplitResult
    host: str
    port: int
    addresses: tuple[IPAddress, ...]


def system_resolver(host: str, port: int) -> list[str]:
    infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    return [str(info[4][0]).split("%", 1)[0] for info in infos]


def address_refusal(address: IPAddress, *, allow_private: bool) -> str | None:
    """Why `address` may not receive webhooks, or None if it may."""
    if isinstance(address, ipaddress.IPv6Address):
        # IPv4 inside IPv6 (mapped, 6to4, Teredo) is judged as the IPv4 address it reaches.
        embedded = (
            address.ipv4_mapped
            or address.sixtofour
            or (address.teredo[1] if address.teredo else None)
        )
        if embedded is not None:
            address = embedded
    if address in METADATA_ADDRESSES:
        return f"{address} is a cloud metadata address"
    if address.is_link_local:
        return f"{address} is link-local"
    if address.is_multicast or address.is_unspecified or address.is_reserved:
        return f"{address} is not a unicast host address"
    if address.is_global:
        return None
    if allow_private and (address.is_loopback or address.is_private or _is_shared(address)):
        return None
    kind = "loopback" if address.is_loopback else "private"
    return f"{address} is a {kind} address (allowed only with WHICHSENSE_ALLOW_PRIVATE_WEBHOOKS)"


def _is_shared(address: IPAddress) -> bool:
    return isinstance(address, ipaddress.IPv4Address) and address in ipaddress.ip_network(
        "100.64.0.0/10"
    )


def check_syntax(url: str) -> SplitResult:
    """The parsed URL if it is an absolute http(s) URL with a host; else WebhookUrlRefused."""
    if len(url) > MAX_URL_CHARS:
        raise WebhookUrlRefused(f"the callback URL is longer than {MAX_URL_CHARS} characters")
    try:
        parts = urlsplit(url)
        _ = parts.port  # raises ValueError for a bad port
    except ValueError as exc:
        raise WebhookUrlRefused(f"the callback URL is malformed: {exc}") from None
    if parts.scheme not in ("http", "https"):
        raise WebhookUrlRefused("the callback URL must use http or https")
    if not parts.hostname:
        raise WebhookUrlRefused("the callback URL has no host")
    if parts.username or parts.password:
        raise WebhookUrlRefused("the callback URL must not carry credentials")
    return parts


def check_url(url: str, *, allow_private: bool, resolver: Resolver = system_resolver) -> CheckedUrl:
    """Check syntax and every resolved address; WebhookUrlRefused names the first problem."""
    parts = check_syntax(url)
    host = parts.hostname or ""
    port = parts.port or (443 if parts.scheme == "https" else 80)
    try:
        literal: IPAddress | None = ipaddress.ip_address(host)
    except ValueError:
        literal = None
    if literal is not None:
        raw = [str(literal)]
    else:
        try:
            raw = list(resolver(host, port))
        except (OSError, UnicodeError) as exc:
            raise WebhookUrlRefused(
                f"the callback host {host!r} does not resolve: {exc}", transient=True
            ) from None
    addresses: list[IPAddress] = []
    for text in dict.fromkeys(raw):
        address = ipaddress.ip_address(text)
        refusal = address_refusal(address, allow_private=allow_private)
        if refusal is not None:
            raise WebhookUrlRefused(f"the callback host {host!r} resolves to {refusal}")
        addresses.append(address)
    if not addresses:
        raise WebhookUrlRefused(f"the callback host {host!r} does not resolve", transient=True)
    return CheckedUrl(url=url, parts=parts, host=host, port=port, addresses=tuple(addresses))
