from timingkit.cli import main

raise SystemExit(main())
