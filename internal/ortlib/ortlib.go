// Package ortlib finds the ONNX Runtime shared library that Brightfold runs
// models with, and says how to get it when it is absent.
package ortlib

import (
	"fmt"
	"os"
	"path/filepath"
)

// FileName is the library's file name inside the npm package onnxruntime-node@1.30.0.
const FileName = "libonnxruntime.so.1"

// EnvVar names the environment variable that may point at the library.
const EnvVar = "BRIGHTFOLD_ORT_LIB"

// CacheDir is the repository-relative folder that `make setup` fills.
const CacheDir = ".cache/onnxruntime"

// InstallHint is the command that installs the library.
const InstallHint = "run `make setup` in the Brightfold source folder, or set " + EnvVar +
	" to the path of " + FileName + " (ONNX Runtime 1.30.0)"

// Find returns the library path: the explicit flag value first, then the
// environment variable, then the repository cache folder (searched upwards
// from the working directory and from the executable), then beside the binary.
func Find(flagValue string) (string, error) {
	if flagValue != "" {
		return checkFile(flagValue, "--ort-lib")
	}
	if p := os.Getenv(EnvVar); p != "" {
		return checkFile(p, EnvVar)
	}
	for _, p := range candidates() {
		if fi, err := os.Stat(p); err == nil && !fi.IsDir() {
			return p, nil
		}
	}
	return "", fmt.Errorf("ONNX Runtime library %s not found: %s", FileName, InstallHint)
}

func checkFile(p, from string) (string, error) {
	fi, err := os.Stat(p)
	if err != nil {
		return "", fmt.Errorf("ONNX Runtime library from %s: %w; %s", from, err, InstallHint)
	}
	if fi.IsDir() {
		p = filepath.Join(p, FileName)
		return checkFile(p, from)
	}
	return p, nil
}

func candidates() []string {
	var starts []string
	if wd, err := os.Getwd(); err == nil {
		starts = append(starts, wd)
	}
	exeDir := ""
	if exe, err := os.Executable(); err == nil {
		if r, err := filepath.EvalSymlinks(exe); err == nil {
			exe = r
		}
		exeDir = filepath.Dir(exe)
		starts = append(starts, exeDir)
	}
	var out []string
	for _, s := range starts {
		for d := s; ; d = filepath.Dir(d) {
			out = append(out, filepath.Join(d, CacheDir, FileName))
			if filepath.Dir(d) == d {
				break
			}
		}
	}
	if exeDir != "" {
		out = append(out, filepath.Join(exeDir, FileName))
	}
	return out
}
