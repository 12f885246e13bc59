from hashaudit.cli import main

main()
