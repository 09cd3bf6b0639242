package measure

var nnOps = map[string]opRule{}
