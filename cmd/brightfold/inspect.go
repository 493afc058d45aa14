package main

func runInspect(e *env, args []string) error {
	return usageError("brightfold inspect: not built yet")
}
