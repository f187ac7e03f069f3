"""Where a webhook may send: public addresses only, unless the operator allows a network.

A webhook URL is chosen by a study's write key, and the service sends to it from inside the lab's
network. Left unchecked, a URL such as ``http://127.0.0.1:5432/``, ``http://169.254.169.254/`` or
a private address would make the service probe hosts its callers cannot reach. So a URL's host is
resolved and every address it stands for must be global: not loopback, link-local, private,
unspecified, multicast or reserved (the properties of Python's ``ipaddress``, which follow the IANA
special-purpose address registries, RFC 6890), unless it lies in one of the networks of
``EPOCH_ASSAY_WEBHOOK_ALLOWED_NETWORKS`` (a LIMS on the lab's own network).

The check is made when a webhook is registered and again before every attempt, on the address the
sender then connects to: the sender connects to that address itself, with the URL's host name in
the Host header and in TLS's server name, so a DNS answer that changes between the check and the
connection (DNS rebinding) cannot redirect it.
"""

import ipaddress
import socket
from collections.abc import Sequence
from dataclasses import dataclass
from urllib.parse import urlsplit

Address = ipaddress.IPv4Address | ipaddress.IPv6Address
Network = ipaddress.IPv4Network | ipaddress.IPv6Network
_DEFAULT_PORTS = {"http": 80, "https": 443}


class TargetRefused(Exception):
    """The URL's host cannot be resolved, or stands for an address webhooks may not reach.

    ``category`` is the generic class of the refusal, the only part written to a delivery log:
    "unresolvable" or "not public".
    """

    def __init__(self, reason: str, category: str) -> None:
        super().__init__(reason)
        self.category = category


@dataclass(frozen=True)
class Target:
    """A checked webhook destination: connect to ``address``; send ``host_header`` and ``server_name``."""

    url: str
    address: Address
    connect_url: str
    host_header: str
    server_name: str


def refusal_of(address: Address, allowed: Sequence[Network]) -> str | None:
    """Why ``address`` may not receive webhooks ("a loopback address", ...), or None when it may."""
    if any(address in network for network in allowed):
        return None
    mapped = getattr(address, "ipv4_mapped", None)
    checked = mapped if mapped is not None else address
    for property_name, words in (
        ("is_loopback", "a loopback address"),
        ("is_link_local", "a link-local address"),
        ("is_private", "a private address"),
        ("is_unspecified", "the unspecified address"),
        ("is_multicast", "a multicast address"),
        ("is_reserved", "a reserved address"),
    ):
        if getattr(checked, property_name):
            return words
    return None


def resolve(url: str, allowed: Sequence[Network]) -> Target:
    """Resolve ``url``'s host and check every address it stands for; the target to connect to.

    Raises :class:`TargetRefused` with a reason in our own words (never the resolver's text).
    """
    parts = urlsplit(url)
    host = parts.hostname
    if parts.scheme not in _DEFAULT_PORTS or not host:
        raise TargetRefused("the URL must be http:// or https:// with a host name", "unresolvable")
    port = parts.port or _DEFAULT_PORTS[parts.scheme]
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except (OSError, UnicodeError):
        raise TargetRefused(f"the host {host!r} cannot be resolved", "unresolvable") from None
    addresses = list(dict.fromkeys(ipaddress.ip_address(str(info[4][0]).split("%")[0]) for info in infos))
    if not addresses:
        raise TargetRefused(f"the host {host!r} cannot be resolved", "unresolvable")
    for address in addresses:
        reason = refusal_of(address, allowed)
        if reason is not None:
            raise TargetRefused(
                f"the host {host!r} stands for {reason}, which webhooks may not reach; use a public address, "
                "or ask the operator to allow the network in EPOCH_ASSAY_WEBHOOK_ALLOWED_NETWORKS",
                "not public",
            )
    address = addresses[0]
    literal = f"[{address}]" if address.version == 6 else str(address)
    connect_url = parts._replace(netloc=f"{literal}:{port}").geturl()
    default_port = port == _DEFAULT_PORTS[parts.scheme]
    host_in_url = f"[{host}]" if ":" in host else host
    host_header = host_in_url if default_port else f"{host_in_url}:{port}"
    return Target(url=url, address=address, connect_url=connect_url, host_header=host_header, server_name=host)
