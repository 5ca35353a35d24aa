LR=3e-6
