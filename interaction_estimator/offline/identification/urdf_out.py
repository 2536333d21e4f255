"""The identified model written as a URDF: the given URDF with the identified links'
``<inertial>`` elements replaced and each identified tool added as a link on a fixed joint.

Everything else (joints, limits, visual and collision elements, transmissions, comments) is
kept as it was: the file is parsed with xml.etree (comments kept) and only the inertial
elements of identified links are rewritten. Numbers are written with 17 significant digits
(``repr``), so the file reads back to the identified values exactly. Each written inertial
gives the centre of mass as its origin (no rotation) and the inertia about it in the link's
axes, the form every URDF reader takes.
"""
from __future__ import annotations

import xml.etree.ElementTree as ET
from collections.abc import Sequence

import numpy as np

from . import inertia as inr
from .structure import Layout

MOUNT_SUFFIX = "_mount"


def _num(x: float) -> str:
    v = float(x)
    return repr(0.0 if v == 0 else v)


def _inertial_element(pi: np.ndarray) -> ET.Element:
    m, c, i_c = inr.summary(pi)
    if not m > 0:
        c = np.zeros(3)
    el = ET.Element("inertial")
    ET.SubElement(el, "origin", {"xyz": " ".join(_num(x) for x in c), "rpy": "0 0 0"})
    ET.SubElement(el, "mass", {"value": _num(m)})
    six = inr.six_of(0.5 * (i_c + i_c.T))
    ET.SubElement(el, "inertia", {"ixx": _num(six[0]), "ixy": _num(six[1]), "ixz": _num(six[3]),
                                  "iyy": _num(six[2]), "iyz": _num(six[4]), "izz": _num(six[5])})
    el.tail = "\n"
    return el


def identified_urdf(urdf: str, layout: Layout, links: np.ndarray, changed: Sequence[bool],
                    tools: np.ndarray, header: Sequence[str]) -> str:
    """The URDF text with the links whose ``changed`` flag is set given their identified
    parameters ``links`` (n, 10; each in its joint's frame, as :class:`~.structure.Body`) and
    the tools ``tools`` (k, 10; each in its link's frame) added. ``header`` lines become an XML
    comment at the top of ``<robot>``."""
    parser = ET.XMLParser(target=ET.TreeBuilder(insert_comments=True))
    root = ET.fromstring(urdf, parser=parser)
    by_name = {link.get("name"): link for link in root.iter("link")}
    for b, body in enumerate(layout.bodies):
        if not changed[b]:
            continue
        link = by_name[body.link]
        pi_link = np.linalg.solve(body.placement, links[b])   # joint frame -> link frame
        old = link.find("inertial")
        new = _inertial_element(pi_link)
        if old is not None:
            index = list(link).index(old)
            link.remove(old)
            link.insert(index, new)
        else:
            link.insert(0, new)
    joints = {j.get("name") for j in root.iter("joint")}
    for tool, pi in zip(layout.tools, tools):
        name, k = tool.name + MOUNT_SUFFIX, 1
        while name in joints:       # a joint of that name exists: the first free numbered one
            k += 1
            name = f"{tool.name}{MOUNT_SUFFIX}_{k}"
        joints.add(name)
        joint = ET.SubElement(root, "joint", {"name": name, "type": "fixed"})
        ET.SubElement(joint, "parent", {"link": tool.link})
        ET.SubElement(joint, "child", {"link": tool.name})
        ET.SubElement(joint, "origin", {"xyz": "0 0 0", "rpy": "0 0 0"})
        joint.tail = "\n"
        link = ET.SubElement(root, "link", {"name": tool.name})
        link.append(_inertial_element(pi))
        link.tail = "\n"
    comment = ET.Comment(" " + "\n     ".join(header) + " ")
    comment.tail = "\n"
    root.insert(0, comment)
    return '<?xml version="1.0"?>\n' + ET.tostring(root, encoding="unicode") + "\n"
