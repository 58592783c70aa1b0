"""The safety wording a user meets, each text once.

Every place that warns (console start, remote-command modal, headless runs, the report) takes
its text from here, so a change of wording is made in one place and reviewed as one diff. The
texts differ on purpose: each is worded for where it is read.
"""

from __future__ import annotations

# The console's first screen: acknowledged before anything is polled or operated.
SAFETY_ACKNOWLEDGEMENT = """\
This console records meter readings while a network is switched. Switching live plant can kill.

\u2022 Qualified persons only: work only on equipment you are trained, authorised and fit to operate.
\u2022 The site's switching procedures, permits and lockout/tagout govern every operation; the sequence shown here is a measurement plan, not a switching programme.
\u2022 Local codes, regulations and licensed practice prevail over anything this tool says.
\u2022 This tool is no interlock and does not replace one. It may read wrong, late or not at all; prove dead with approved test equipment, never with this screen.
\u2022 Remote commands are sent only when the profile enables control and you confirm each one.
"""

# Printed first by every headless walk (run, demo and resume with --headless).
HEADLESS_CAUTION = (
    "CAUTION: switching a live bench is for qualified persons only. Follow the site switching "
    "procedure and lockout/tagout; local codes and licensed practice prevail. benchwalk records "
    "and checks readings: it is no interlock and does not make any operation safe."
)

# In the HTML and Markdown report, after a bold "Caution.".
REPORT_CAUTION = (
    "Switching and measuring on energized equipment is for qualified persons only. Follow the "
    "site's switching procedures and lockout/tagout rules; local codes and licensed practice "
    "prevail over anything in this report. benchwalk records and checks readings: it is not an "
    "interlock and does not make any operation safe."
)

# In the console's modal before a remote switch command is sent.
REMOTE_COMMAND_CAUTION = (
    "CAUTION: this sends a real command to the controller. Operating plant is your site's "
    "switching procedure, not this tool's: make sure the switching programme allows it, the "
    "area is clear and lockout/tagout is respected. This tool is no interlock."
)

# Printed first by the fault-validation commands and kept in their summary.json.
STAGED_FAULT_CAUTION = (
    "CAUTION: staging a fault is hazardous work for qualified persons only, under the site's "
    "switching procedures, permits and lockout/tagout; local codes and licensed practice "
    "prevail. benchwalk only analyses recordings of a fault: it never stages, triggers or "
    "controls one, and it is no interlock."
)

# In the console's remote modal on the simulated bench, instead of REMOTE_COMMAND_CAUTION.
SIMULATED_REMOTE_CAUTION = (
    "CAUTION, SIMULATED BENCH: this command goes to the simulated controller on this computer "
    "and operates nothing real. On a real bench the same keys send a real command: there, "
    "operating plant is your site's switching procedure, not this tool's; the switching "
    "programme must allow it, the area be clear and lockout/tagout respected. This tool is no "
    "interlock."
)
