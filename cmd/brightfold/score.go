package main

func runScore(e *env, args []string) error {
	return usageError("brightfold score: not built yet")
}
