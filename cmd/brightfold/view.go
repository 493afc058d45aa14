package main

func runView(e *env, args []string) error {
	return usageError("brightfold view: not built yet")
}
