"""Short cautions printed with every design, for the bench and the first power-up.

They are general habits for low-voltage audio work, kept short on purpose. None of them
replaces the builder's own judgement, and the last one hands the final word to local
rules and to people licensed for the work.
"""

from __future__ import annotations

__all__ = ["CAUTIONS", "cautions_line", "cautions_text"]

#: (topic, caution) pairs, in the order a builder meets them.
CAUTIONS: tuple[tuple[str, str], ...] = (
    ("Batteries",
     "A 9 V battery has both terminals side by side: a key, coin or paper clip across them can get hot "
     "enough to start a fire. Keep spares in their packet or with the terminals taped, never loose in a "
     "pocket or drawer. Take the battery out of a box you will not use for a while, and do not mix fresh "
     "and tired cells or different chemistries."),
    ("Electrolytic capacitors",
     "Electrolytics have a + and a − lead. Fitted the wrong way round or run above their voltage rating "
     "they can heat up, vent or burst. Fit each one as the parts list says (it follows the DC voltages, "
     "not just the board marking), choose a rating above the highest supply you will ever use, and keep "
     "your face away from the board the first time it is powered."),
    ("Power adapters",
     "Before plugging in an adapter, read its label: AC or DC, the voltage, and which way the plug is "
     "wired (centre pin + or −). A plug that fits is not proof that it matches. An unregulated adapter "
     "reads well above its label when lightly loaded, so rate the parts for that. Use only enclosed, "
     "certified mains adapters: this project has no mains wiring and should never get any."),
    ("First power-up",
     "Power the stage the first time from a battery or a current-limited bench supply with a meter in "
     "series, and compare the current with the bring-up sheet. If it reads zero or far above the expected "
     "range, disconnect at once and look for a short, a reversed part or a wrong pinout."),
    ("Listening levels",
     "Turn the monitoring level down before connecting or powering a new circuit: a prototype that "
     "oscillates can send a full-scale signal into headphones or speakers. Switch amplifiers and powered "
     "speakers on last and off first, and keep long listening sessions at moderate levels."),
    ("Local rules",
     "These notes are general. Follow your local electrical codes and product rules, and leave anything "
     "beyond a battery- or adapter-powered low-voltage stage to licensed practice."),
)


def cautions_text() -> str:
    """The cautions as plain text, one paragraph each."""
    return "\n\n".join(f"{topic}: {text}" for topic, text in CAUTIONS) + "\n"


def cautions_line(where: str = "report.html") -> str:
    """The cautions in two lines for the terminal (``where`` has them in full)."""
    return ("Before you build: " + "; ".join(t.lower() for t, _ in CAUTIONS[:-1])
            + f" — see the cautions in {where}.\n"
            "They are general habits: follow your local electrical codes and leave anything beyond a "
            "battery- or adapter-powered low-voltage stage to licensed practice.")
