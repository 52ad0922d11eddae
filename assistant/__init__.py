"""ohmtrail: a troubleshooting assistant for vehicle electrical faults.

The public API is what this package and its modules export; the CLI (``assistant.cli``) uses
nothing else.
"""

from __future__ import annotations

__version__ = "0.1.0"
