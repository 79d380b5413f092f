"""wsad-synth scenario=NAME out=DIR [key=value ...]: write a synthetic store."""
from __future__ import annotations

import sys

from ..errors import WsadError, run_cli

USAGE = ("usage: wsad-synth scenario=NAME out=DIR [key=value ...]\n"
         "  writes a synthetic feature store from the recipe synthetic/NAME.yaml;\n"
         "  key=value overrides any recipe key, e.g. rho=0.95 events.snr=2 dim=128")


def _main(argv: list[str]) -> int:
    from ..store import summarize
    from ..synthetic import generate_store, load_scenario, scenario_names

    if not argv or argv[0] in ("-h", "--help"):
        print(USAGE)
        print(f"  scenarios: {', '.join(scenario_names())}")
        return 0
    opts = {}
    rest = []
    for a in argv:
        key = a.split("=", 1)[0]
        if key in ("scenario", "out", "quiet") and "=" in a:
            opts[key] = a.split("=", 1)[1]
        else:
            rest.append(a)
    if "out" not in opts:
        raise WsadError("out=DIR is required (a new folder for the store)")
    cfg = load_scenario(opts.get("scenario", "warehouse"), rest)
    out = generate_store(cfg, opts["out"], progress=opts.get("quiet", "false") != "true")
    print(summarize(out))
    return 0


def main() -> None:
    run_cli(lambda: _main(sys.argv[1:]), "wsad-synth")
