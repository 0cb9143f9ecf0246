print("bench main")
