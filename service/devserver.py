"""`make serve`: the development server on HOST:PORT with a ready-to-paste example."""

from __future__ import annotations

import argparse
import json
import os

from service.examples import README_EXAMPLE


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--host", default=os.environ.get("HOST", "127.0.0.1"))
    parser.add_argument("--port", type=int, default=int(os.environ.get("PORT", "8000")))
    args = parser.parse_args()
    from service import create_app

    app = create_app()
    one_line = json.dumps(README_EXAMPLE)
    print(f"gainchain listening on http://{args.host}:{args.port}\nTry:\n"
          f"curl -s -X POST http://{args.host}:{args.port}/v1/designs "
          f"-H 'Content-Type: application/json' -d '{one_line}'\n", flush=True)
    app.run(host=args.host, port=args.port, debug=False, use_reloader=False)


if __name__ == "__main__":
    main()
