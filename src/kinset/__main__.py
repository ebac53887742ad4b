from kinset.cli import main

raise SystemExit(main())
