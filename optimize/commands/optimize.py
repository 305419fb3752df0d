"""``tunnelsmith optimize``: start or resume a campaign, then write its outputs.

The work is :func:`~tunnelsmith.optimize.commands.campaign_run.run_campaign`, shared with
the Python interface (``tunnelsmith.run_campaign``).
"""

from __future__ import annotations

from tunnelsmith.optimize.commands.campaign_run import run_campaign

__all__ = ["run_campaign"]
