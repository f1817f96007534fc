"""Home dashboard discovery: config messages in the open MQTT discovery convention of a
widely used home-automation project (`<discovery_prefix>/sensor/<node>/<object>/config`,
retained), so a dashboard shows the kiln's chamber temperature, setpoint, step and alarms
without hand-written configuration.

The values come from the retained `state` topic, read with templates; the state keys they
read are listed in ENTITIES (one place), and must match the engine's status dict. Each entity
takes the `attributes` topic as its attributes (the whole texts the state cuts at 255
characters), and every config carries an `origin` block (name, sw_version, support_url)
that says which program published it, as the convention asks of publishers.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from importlib import metadata

from tuikiln.alerts.settings import MqttSettings


@dataclass(frozen=True)
class Entity:
    object_id: str
    name: str
    value_template: str
    unit: str | None = None
    device_class: str | None = None
    icon: str | None = None


# State keys read: chamber_c, setpoint_c (°C numbers), step_words (text), alarms (a list).
ENTITIES: tuple[Entity, ...] = (
    Entity("chamber", "Chamber temperature", "{{ value_json.get('chamber_c') }}", "°C",
           "temperature"),
    Entity("setpoint", "Setpoint", "{{ value_json.get('setpoint_c') }}", "°C", "temperature"),
    Entity("step", "Step", "{{ value_json.get('step_words') or 'idle' }}", icon="mdi:stairs"),
    Entity("alarm", "Active alarms", "{{ (value_json.get('alarms') or []) | length }}",
           icon="mdi:alarm-light"),
)


_URL_LABELS = ("issues", "bug tracker", "support", "homepage", "home", "source", "repository")


def support_url() -> str | None:
    """The package's own help page (Project-URL metadata, from pyproject.toml [project.urls]),
    best label first; None when it names none. Dashboards check it is a web address, so
    nothing else is put there in its place."""
    try:
        entries = metadata.metadata("tuikiln").get_all("Project-URL") or []
    except metadata.PackageNotFoundError:  # run from a bare source tree
        entries = []
    urls = {}
    for entry in entries:
        label, _, url = entry.partition(",")
        urls[label.strip().lower()] = url.strip()
    for label in _URL_LABELS:
        if urls.get(label, "").startswith(("https://", "http://")):
            return urls[label]
    return None


def origin() -> dict[str, str]:
    from tuikiln import __version__

    block = {"name": "tuikiln", "sw_version": __version__}
    url = support_url()
    if url:
        block["support_url"] = url
    return block


def discovery_messages(settings: MqttSettings) -> list[tuple[str, str]]:
    """(topic, JSON payload) for each entity; published retained at every (re)connect."""
    node = settings.id
    device = {
        "identifiers": [f"tuikiln-{node}"],
        "name": settings.kiln_name,
        "model": "tuikiln",
    }
    publisher = origin()
    messages: list[tuple[str, str]] = []
    for entity in ENTITIES:
        config: dict[str, object] = {
            "name": entity.name,
            "state_topic": settings.topic("state"),
            "value_template": entity.value_template,
            "json_attributes_topic": settings.topic("attributes"),
            "unique_id": f"tuikiln-{node}-{entity.object_id}",
            "availability_topic": settings.topic("status"),
            "payload_available": "online",
            "payload_not_available": "offline",
            "device": device,
            "origin": publisher,
        }
        if entity.unit:
            config["unit_of_measurement"] = entity.unit
            config["state_class"] = "measurement"
        if entity.device_class:
            config["device_class"] = entity.device_class
        if entity.icon:
            config["icon"] = entity.icon
        topic = f"{settings.discovery_prefix}/sensor/{node}/{entity.object_id}/config"
        messages.append((topic, json.dumps(config, ensure_ascii=False)))
    return messages
