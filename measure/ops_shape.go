package measure

var shapeOps = map[string]opRule{}
