package measure

import "sync"

// The operator table. Each family file (ops_*.go) declares its rows in a map
// of its own; this list joins them. Adding an operator touches its family
// file and, for a new family, one line here.
var opFamilies = []map[string]opRule{
	elementwiseOps,
	shapeOps,
	controlOps,
	convOps,
	poolOps,
	matmulOps,
	normOps,
	rnnOps,
	quantOps,
	resizeOps,
	reduceOps,
	signalOps,
	lossOps,
	detectOps,
}

var (
	opTableOnce sync.Once
	opTable     map[string]opRule
)

// opRules returns the joined operator table, keyed by op type ("Conv"), or
// by "domain:op" for operators outside the default ONNX domain.
func opRules() map[string]opRule {
	opTableOnce.Do(func() {
		opTable = map[string]opRule{}
		for _, fam := range opFamilies {
			for k, r := range fam {
				if _, dup := opTable[k]; dup {
					panic("measure: operator " + k + " registered twice")
				}
				opTable[k] = r
			}
		}
	})
	return opTable
}

// SupportedOps lists the operators shape inference has rules for.
func SupportedOps() []string {
	var out []string
	for k := range opRules() {
		out = append(out, k)
	}
	return out
}
