package main

func runBundle(e *env, args []string) error {
	return usageError("brightfold bundle: not built yet")
}
