package main

func runDemo(e *env, args []string) error {
	return usageError("brightfold demo: not built yet")
}
