# Reference for delong_test.go: R's pROC (r-cran-proc) on two ratings of the
# same cases. Usage: Rscript delong_proc.R [CSV with columns truth,a,b]
# Without a CSV it uses pROC's aSAH data (outcome Poor = positive; a = s100b,
# b = wfns as a number). Prints JSON: the data used, ci.auc(method="delong")
# of each rating and roc.test(method="delong", paired=TRUE).
suppressMessages(library(pROC))
args <- commandArgs(trailingOnly = TRUE)
if (length(args) >= 1) {
  d <- read.csv(args[1])
} else {
  data(aSAH)
  d <- data.frame(truth = as.integer(aSAH$outcome == "Poor"),
                  a = aSAH$s100b, b = as.numeric(aSAH$wfns))
}
ra <- roc(d$truth, d$a, levels = c(0, 1), direction = "<", quiet = TRUE)
rb <- roc(d$truth, d$b, levels = c(0, 1), direction = "<", quiet = TRUE)
ca <- ci.auc(ra, method = "delong")
cb <- ci.auc(rb, method = "delong")
tt <- roc.test(ra, rb, method = "delong", paired = TRUE)
num <- function(x) paste(sprintf("%.17g", x), collapse = ",")
cat(sprintf('{"truth":[%s],"a":[%s],"b":[%s],', num(d$truth), num(d$a), num(d$b)))
cat(sprintf('"auc_a":%s,"ci_a":[%s],"auc_b":%s,"ci_b":[%s],', num(as.numeric(ra$auc)),
            num(c(ca[1], ca[3])), num(as.numeric(rb$auc)), num(c(cb[1], cb[3]))))
cat(sprintf('"z":%s,"p":%s}\n', num(tt$statistic), num(tt$p.value)))
