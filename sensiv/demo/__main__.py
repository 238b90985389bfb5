"""``python -m sensiv.demo DIR`` writes the invented example files into DIR."""

from sensiv.demo import main

raise SystemExit(main())
