from plansieve.cli import main

raise SystemExit(main())
