"""The safety and preparation items a crew ticks before flowing a hydrant.

Drawn from common trade practice for hydrant flow testing (NFPA 291 and AWWA M17 describe the test;
the cautions themselves are common practice). The list is a reminder, not a procedure: local
procedures, the water utility's rules and the authority having jurisdiction always come first.
Ticked items are saved with the test (in its header).

Safety items (``safety=True``: traffic, where the water goes, water hammer, the fire service,
discoloured water) are confirmed one by one, each with its own tap: the one-tap ALL DONE ticks only
the other required items, so that nobody confirms a hazard without reading it.
"""

from __future__ import annotations

from dataclasses import dataclass

LOCAL_RULES = ("Local procedures rule: follow your utility's flushing and testing procedure, the "
               "authority having jurisdiction and local codes where they differ from this list.")

DESIGN_CAUTION = ("Results describe the system on the day of the test. Fire-protection design needs "
                  "the authority having jurisdiction and a licensed engineer.")


@dataclass(frozen=True)
class Item:
    key: str
    title: str
    detail: str
    required: bool = True
    safety: bool = False  # a hazard to people or property: confirmed by its own tap, never in bulk


ITEMS: tuple[Item, ...] = (
    Item("traffic", "Traffic and people kept clear",
         "Cones and signs up, a spotter where the stream crosses a road or path.", safety=True),
    Item("drainage", "Water has somewhere to go",
         "Stream aimed at a drain or a safe run-off; no flooding of property, no erosion, no ice.",
         safety=True),
    Item("slowly", "Open and close slowly, one hydrant at a time",
         "Fast valve moves cause water hammer that can burst mains and services.", safety=True),
    Item("fire_service", "Fire service told",
         "Fire protection nearby is reduced while the hydrants flow.", safety=True),
    Item("customers", "Affected customers told",
         "Flowing stirs up sediment: warn of discoloured water and low pressure.", safety=True),
    Item("dechlorination", "Dechlorination",
         "A stream or storm drain may need a diffuser with dechlorinating tablets.",
         required=False),
    Item("system_state", "Tank levels, pumps and valves noted",
         "The model check needs the system as it was during the test: write it in the notes."),
)


def item_keys() -> list[str]:
    return [i.key for i in ITEMS]


def missing_items(ticked: dict) -> list[Item]:
    """Required items not ticked yet."""
    return [i for i in ITEMS if i.required and not ticked.get(i.key)]


def bulk_keys() -> list[str]:
    """What ALL DONE may tick in one tap: the required items that are not safety items."""
    return [i.key for i in ITEMS if i.required and not i.safety]
