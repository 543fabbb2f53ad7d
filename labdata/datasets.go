package labdata

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
)

// EnvDatasets names the environment variable that overrides where the shared datasets
// are found.
const EnvDatasets = "VOLTCAST_DATASETS"

// ErrNoDatasets is returned by [DatasetsDir] when the datasets cannot be found; tests
// that need them skip on it.
var ErrNoDatasets = errors.New("shared datasets not found")

// DatasetsDir returns the folder holding the shared datasets: $VOLTCAST_DATASETS when set,
// otherwise ../shared/datasets relative to the repository root, which is found by
// walking up from the working directory to the first folder holding go.mod. The folder
// must exist.
func DatasetsDir() (string, error) {
	if d := os.Getenv(EnvDatasets); d != "" {
		if st, err := os.Stat(d); err != nil || !st.IsDir() {
			return "", fmt.Errorf("%w: %s=%s is not a folder", ErrNoDatasets, EnvDatasets, d)
		}
		return d, nil
	}
	root, err := RepoRoot()
	if err != nil {
		return "", fmt.Errorf("%w: %v (set %s)", ErrNoDatasets, err, EnvDatasets)
	}
	d := filepath.Join(root, "..", "shared", "datasets")
	if st, err := os.Stat(d); err != nil || !st.IsDir() {
		return "", fmt.Errorf("%w: no folder %s (set %s)", ErrNoDatasets, d, EnvDatasets)
	}
	return filepath.Clean(d), nil
}

// Dataset returns the path of one dataset folder (for example "pan18650pf") under
// [DatasetsDir], or an error wrapping [ErrNoDatasets] if it is absent.
func Dataset(name string) (string, error) {
	root, err := DatasetsDir()
	if err != nil {
		return "", err
	}
	d := filepath.Join(root, name)
	if st, err := os.Stat(d); err != nil || !st.IsDir() {
		return "", fmt.Errorf("%w: no dataset %s in %s", ErrNoDatasets, name, root)
	}
	return d, nil
}

// RepoRoot returns the first folder at or above the working directory that holds a
// go.mod file.
func RepoRoot() (string, error) {
	dir, err := os.Getwd()
	if err != nil {
		return "", err
	}
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			return dir, nil
		}
		up := filepath.Dir(dir)
		if up == dir {
			return "", errors.New("no go.mod above the working directory")
		}
		dir = up
	}
}
