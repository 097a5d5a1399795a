from timingkit.cli.main import main

raise SystemExit(main())
