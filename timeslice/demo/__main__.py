"""``python -m timeslice.demo [OUT_DIR]``: regenerate the demo files."""

from timeslice.demo import main

raise SystemExit(main())
