package ports

import "runtime"

func runtimeGosched() { runtime.Gosched() }
