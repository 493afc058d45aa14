# Reference for audit_test.go: R's pROC (r-cran-proc) on a sweep's
# scores.tsv. Usage: Rscript audit_proc.R scores.tsv
# Keeps rows with status "scored" and a label, then prints JSON with the
# number of cases, auc(roc(label, probability, direction = "<")) and
# ci.auc(method = "delong") bounds.
suppressMessages(library(pROC))
args <- commandArgs(trailingOnly = TRUE)
d <- read.delim(args[1], na.strings = "n/a", quote = "", stringsAsFactors = FALSE)
d <- d[d$status == "scored" & !is.na(d$label), ]
r <- roc(d$label, d$probability, levels = c(0, 1), direction = "<", quiet = TRUE)
ci <- ci.auc(r, method = "delong")
cat(sprintf('{"n":%d,"auc":%.17g,"lo":%.17g,"hi":%.17g}\n', nrow(d), as.numeric(r$auc), ci[1], ci[3]))
