from allowance.cli import main

main()
