from rxlog.cli import main

main()
