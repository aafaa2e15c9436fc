from filtertwin.cli import main

raise SystemExit(main())
