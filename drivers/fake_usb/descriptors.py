"""A simulated device's descriptors: as pyusb expects them from a backend, and as wire bytes.

Layouts from the USB 2.0 specification, chapter 9.6 (standard descriptors), and the HID 1.11
specification, section 6.2.1 (the HID class descriptor).
"""

from __future__ import annotations

import errno
import struct
from dataclasses import dataclass, field
from typing import Final

from heft.drivers.fake_usb.faults import usb_error
from heft.drivers.fake_usb.fixtures import UsbDeviceDefinition

DESC_DEVICE: Final = 0x01
DESC_CONFIG: Final = 0x02
DESC_STRING: Final = 0x03
DESC_HID_REPORT: Final = 0x22
_LANGID_EN_US: Final = 0x0409


@dataclass(slots=True)
class DeviceDescriptor:
    idVendor: int
    idProduct: int
    bcdUSB: int
    bcdDevice: int
    bMaxPacketSize0: int
    bus: int
    address: int
    port_number: int
    port_numbers: tuple[int, ...]
    speed: int
    bLength: int = 18
    bDescriptorType: int = DESC_DEVICE
    bDeviceClass: int = 0  # class defined per interface
    bDeviceSubClass: int = 0
    bDeviceProtocol: int = 0
    iManufacturer: int = 1
    iProduct: int = 2
    iSerialNumber: int = 3
    bNumConfigurations: int = 1


@dataclass(slots=True)
class ConfigDescriptor:
    wTotalLength: int
    bConfigurationValue: int
    bmAttributes: int
    bMaxPower: int
    bLength: int = 9
    bDescriptorType: int = DESC_CONFIG
    bNumInterfaces: int = 1
    iConfiguration: int = 0
    extra_descriptors: list[int] = field(default_factory=list)


@dataclass(slots=True)
class InterfaceDescriptor:
    bInterfaceNumber: int
    bNumEndpoints: int
    bInterfaceSubClass: int
    bInterfaceProtocol: int
    extra_descriptors: list[int]
    bLength: int = 9
    bDescriptorType: int = 0x04
    bAlternateSetting: int = 0
    bInterfaceClass: int = 0x03  # HID
    iInterface: int = 0


@dataclass(slots=True)
class EndpointDescriptor:
    bEndpointAddress: int
    bmAttributes: int
    wMaxPacketSize: int
    bInterval: int
    bLength: int = 7
    bDescriptorType: int = 0x05
    bRefresh: int = 0
    bSynchAddress: int = 0
    extra_descriptors: list[int] = field(default_factory=list)


def device_descriptor(definition: UsbDeviceDefinition) -> DeviceDescriptor:
    d = definition.device
    return DeviceDescriptor(
        idVendor=d.idVendor, idProduct=d.idProduct, bcdUSB=d.bcdUSB, bcdDevice=d.bcdDevice,
        bMaxPacketSize0=d.bMaxPacketSize0, bus=d.bus, address=d.address,
        port_number=d.port_numbers[-1] if d.port_numbers else 0,
        port_numbers=d.port_numbers, speed=d.speed)


def hid_descriptor(definition: UsbDeviceDefinition) -> bytes:
    """The 9-byte HID class descriptor that follows the interface descriptor."""
    i = definition.interface
    return struct.pack("<BBHBBBH", 9, 0x21, i.bcdHID, i.bCountryCode, 1, DESC_HID_REPORT,
                       len(i.report_descriptor))


def interface_descriptor(definition: UsbDeviceDefinition) -> InterfaceDescriptor:
    i = definition.interface
    return InterfaceDescriptor(
        bInterfaceNumber=i.bInterfaceNumber, bNumEndpoints=len(i.endpoints),
        bInterfaceSubClass=i.bInterfaceSubClass, bInterfaceProtocol=i.bInterfaceProtocol,
        extra_descriptors=list(hid_descriptor(definition)))


def endpoint_descriptor(definition: UsbDeviceDefinition, index: int) -> EndpointDescriptor:
    ep = definition.interface.endpoints[index]
    return EndpointDescriptor(bEndpointAddress=ep.bEndpointAddress,
                               bmAttributes=ep.bmAttributes,
                               wMaxPacketSize=ep.wMaxPacketSize, bInterval=ep.bInterval)


def config_descriptor(definition: UsbDeviceDefinition) -> ConfigDescriptor:
    c = definition.configuration
    return ConfigDescriptor(wTotalLength=len(config_descriptor_bytes(definition)),
                             bConfigurationValue=c.bConfigurationValue,
                             bmAttributes=c.bmAttributes, bMaxPower=c.bMaxPower)


def device_descriptor_bytes(definition: UsbDeviceDefinition) -> bytes:
    d = device_descriptor(definition)
    return struct.pack("<BBHBBBBHHHBBBB", 18, DESC_DEVICE, d.bcdUSB, 0, 0, 0,
                       d.bMaxPacketSize0, d.idVendor, d.idProduct, d.bcdDevice, 1, 2, 3, 1)


def config_descriptor_bytes(definition: UsbDeviceDefinition) -> bytes:
    """Configuration, interface, HID and endpoint descriptors, as GET_DESCRIPTOR returns them."""
    c = definition.configuration
    i = definition.interface
    body = struct.pack("<BBBBBBBBB", 9, 0x04, i.bInterfaceNumber, 0, len(i.endpoints), 0x03,
                       i.bInterfaceSubClass, i.bInterfaceProtocol, 0)
    body += hid_descriptor(definition)
    for ep in i.endpoints:
        body += struct.pack("<BBBBHB", 7, 0x05, ep.bEndpointAddress, ep.bmAttributes,
                            ep.wMaxPacketSize, ep.bInterval)
    head = struct.pack("<BBHBBBBB", 9, DESC_CONFIG, 9 + len(body), 1,
                       c.bConfigurationValue, 0, c.bmAttributes, c.bMaxPower)
    return head + body


def string_descriptor(definition: UsbDeviceDefinition, index: int) -> bytes:
    """String descriptor ``index`` (0: the language list); a missing one stalls (EPIPE)."""
    if index == 0:
        return struct.pack("<BBH", 4, DESC_STRING, _LANGID_EN_US)
    d = definition.device
    strings = {1: d.manufacturer, 2: d.product, 3: d.serial_number}
    if index not in strings:
        raise usb_error(errno.EPIPE, f"no string descriptor {index}")
    text = strings[index].encode("utf-16-le")
    return bytes((2 + len(text), DESC_STRING)) + text
