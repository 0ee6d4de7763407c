"""The built-in model list (``models``) as text."""

from __future__ import annotations


def format_models(entries: list[dict]) -> str:
    """One line per model: name, states (or their count, or the network), description."""
    width = max(len(e["name"]) for e in entries)
    lines = [f"{len(entries)} built-in models (use the name wherever a model file is accepted):"]
    for entry in entries:
        network = entry.get("network")
        if entry["states"] is None and network is not None:
            count = network.get("count") or ""
            words = ("network of", count, network["oscillator"], "oscillators")
            states = " ".join(str(w) for w in words if w)
        elif len(entry["states"]) <= 4:
            states = ", ".join(entry["states"])
        else:
            states = f"{len(entry['states'])} states"
        lines.append(f"  {entry['name']:<{width}}  [{states}]  {entry['description']}")
    return "\n".join(lines)
