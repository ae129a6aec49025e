"""The cautions shown wherever fleet leads someone to work on a pump: one text for the pages and the terminal.

Common practice for hydraulic work, in our own words; local codes, the equipment maker's instructions and the
site's procedures come first.
"""

CAUTION_TITLE = "Before you work on a pump"
CAUTIONS = (
    "Isolate and lock out the drive, and prove it dead.",
    "Relieve all pressure, accumulators included: they hold their charge after shutdown.",
    "Oil under pressure can pierce skin. An injection injury is a medical emergency, however small it looks.",
    "Hot oil and hot surfaces burn. Never close a flow tester's loading valve against an unprotected pump.",
    "Follow the equipment maker's instructions, your site's procedures and local regulations.",
)

# Readings on a round are taken with the pump running, close to shafts and couplings.
RUNNING_TITLE = "Readings on a running pump"
RUNNING_CAUTIONS = (
    "Shafts and couplings catch hair, sleeves, gloves and rags in an instant: keep every guard in place, and "
    "never reach past one or take one off to read a gauge.",
    "Read gauges and meters from outside the guarded area. A value you cannot reach safely stays blank: say why "
    "in the note.",
    "A pump under automatic control can start without warning: treat it as running unless it is locked out.",
    "A weeping fitting can spray hot oil: wear eye protection near running pumps.",
)
RUNNING_REMINDER = "The pump is running: keep every guard on, and hands, sleeves and tools clear of shafts."

# Added to the work caution where oil samples are taken (the lab-result form).
SAMPLING_CAUTIONS = (
    "Draw oil only from a fitted sampling valve, as its instructions and your site's procedure say; never by "
    "loosening a fitting or hose under pressure.",
    "Sampled oil can be hot: wear gloves and eye protection, and flush the valve into a waste container first.",
)

# Beside a warning that the oil is above its upper limit (the round form, `fleet round`).
HOT_OIL_CAUTION = ("Oil this hot, and the pipes, fittings and pump body it runs through, burn skin in seconds. "
                   "Let it cool before any hands-on work, and wear heat-resistant gloves and eye protection.")

# Beside a warning that the outlet pressure is above the pump's rated pressure (the round form, `fleet round`): a
# gauge that reads so high may be a slip, or a relief valve set too high or stuck, with every hose on the outlet
# loaded past its design.
OVER_PRESSURE_CAUTION = ("Above its rated pressure every hose and fitting on the pump's outlet is loaded past its "
                         "design and can burst: stay out of line with them, and have the relief valve setting "
                         "checked before anyone works on the circuit.")

# A reason that sends someone to the pump at once carries this phrase (fleet.trend.status writes it).
CHECK_NOW = "check the pump now"
CHECK_NOW_CAUTION = ("Before anyone opens this pump's circuit: lock out the drive, relieve all pressure "
                     "(accumulators too) and let hot oil cool.")


def calls_for_work(reasons) -> bool:
    """True when one of a pump's reasons sends someone to the pump now."""
    return any(CHECK_NOW in (reason or "").lower() for reason in reasons or ())


def caution_text(title: str = CAUTION_TITLE, lines=CAUTIONS) -> str:
    """A caution for the terminal: its title, then one line per point."""
    return "\n".join([f"{title}:"] + [f"  ! {line}" for line in lines])
