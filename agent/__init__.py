"""rotorwatch: an edge monitoring daemon for permanently installed vibration sensors.

The installed package ``rotorwatch`` is the checkout's ``agent/`` folder; ``rotorwatch.simulators`` is the
checkout's ``simulators/`` folder (see DEVELOPERS.md, "How the layout reads").
"""

__version__ = "0.1.0"
