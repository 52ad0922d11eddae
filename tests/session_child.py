"""A diagnosis at the real prompt in a child process, for the kill-and-resume test.

``python tests/session_child.py DB_URL SESSION_ID RULESET``: what is typed on this process's
stdin goes, line by line, into prompt-toolkit's pipe input; every line the technician would
see is printed (flushed) on stdout. The test reads the pages, answers them, and kills this
process with SIGKILL part way through.
"""

from __future__ import annotations

import sys
import threading
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from prompt_toolkit.input import create_pipe_input  # noqa: E402
from prompt_toolkit.output import DummyOutput  # noqa: E402

from assistant.prompt import PromptSource  # noqa: E402
from assistant.ruleset.load import load_ruleset  # noqa: E402
from assistant.session import Engine, Session  # noqa: E402
from assistant.store import open_store  # noqa: E402


def main() -> None:
    url, session_id, ruleset = sys.argv[1:4]
    engine = Engine.build(load_ruleset(ruleset))
    with create_pipe_input() as pipe, open_store(url) as store:
        def forward() -> None:
            for line in sys.stdin:
                pipe.send_text(line)
            pipe.close()

        threading.Thread(target=forward, daemon=True).start()
        source = PromptSource(engine.loaded.ruleset, input=pipe, output=DummyOutput(),
                              write=lambda text: print(text, flush=True))
        print("ready", flush=True)
        Session.begin(store, engine, source, session_id=session_id).run(source)
    print("finished", flush=True)


if __name__ == "__main__":
    main()
