package batch

import (
	"fmt"
	"strings"

	"voxgamma/job"
)

// EstimateCase estimates the peak memory of case c from its dose headers
// (see [job.EstimateBytes]); errors name the file.
func EstimateCase(c Case) (int64, error) {
	refs, evals := doses(c.Reference, c.ReferenceFiles), doses(c.Evaluated, c.EvaluatedFiles)
	nr, err := job.DoseSetVoxels(refs)
	if err != nil {
		return 0, fmt.Errorf("case %s: estimating memory from the reference %s: %w", c.ID, strings.Join(refs, ", "), err)
	}
	ne, err := job.DoseSetVoxels(evals)
	if err != nil {
		return 0, fmt.Errorf("case %s: estimating memory from the evaluated dose %s: %w", c.ID, strings.Join(evals, ", "), err)
	}
	return job.EstimateBytes(nr, ne), nil
}
