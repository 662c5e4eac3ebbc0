"""The serial link to a gateway, in three layers: transport (bytes in and out of a port),
protocol (frames, MessagePack, sequence numbers, retries) and client (one method per device
command). The frame code is firmware_py's own, so host and device frame identically."""
from host_tools.link.client import Client
from host_tools.link.protocol import DeviceRefused, Link
from host_tools.link.transport import open_transport

__all__ = ["Client", "DeviceRefused", "Link", "open_transport"]
