"""``firewatch plant``: every kiln on an MQTT broker on one screen."""

from __future__ import annotations

import argparse

from firewatch.commands._args import UsageError

__all__ = ["add_parser", "run"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("plant", help="every kiln on an MQTT broker on one screen",
                       description="One row per kiln publishing under the prefix: state, segment, temperature, divergence, "
                       "active alarms, data age; Enter opens a kiln, A acknowledges every alarm (applied where sites allow).")
    p.add_argument("--mqtt", required=True, metavar="URL", help="mqtt://HOST:PORT/PREFIX (or mqtts://)")
    p.add_argument("--utc", action="store_true", help="clock times in UTC instead of this computer's time zone")


def run(args: argparse.Namespace) -> int:
    from firewatch.services.mqtt import parse_mqtt_url

    try:
        url = parse_mqtt_url(args.mqtt)
        import paho.mqtt.client  # noqa: F401 (availability check: imported only to see that the extra is installed)
    except ValueError as exc:
        raise UsageError(f"--mqtt: {exc}") from None
    except ImportError:
        raise UsageError("--mqtt: the plant view needs paho-mqtt: pip install 'firewatch-kiln[mqtt]'") from None
    from firewatch.ui.plant import PlantApp

    PlantApp(url, utc=args.utc).run()
    return 0
