from lanqr.cli import main

raise SystemExit(main())
