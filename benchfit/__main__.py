from benchfit.cli import main

raise SystemExit(main())
