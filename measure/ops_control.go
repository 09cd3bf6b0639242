package measure

var controlOps = map[string]opRule{}
