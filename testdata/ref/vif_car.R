#!/usr/bin/Rscript
# Golden VIFs from R's car::vif, written to golden_car.json.
#
# For each dataset in datasets.json: lm(response ~ regressors) on the CSV
# (the response never enters a VIF; it is there because car::vif takes a
# fitted model), then car::vif on the fit. Floats are written with
# sprintf("%.17g"), which round-trips every double.
#
#   /usr/bin/Rscript vif_car.R      (run from this directory)

suppressPackageStartupMessages({
  library(car)
  library(jsonlite)
})

g17 <- function(x) sprintf("%.17g", x)
q <- function(s) paste0('"', s, '"')

specs <- fromJSON("datasets.json", simplifyVector = TRUE)

entries <- character(0)
for (name in names(specs)) {
  s <- specs[[name]]
  d <- read.csv(s$csv, colClasses = "numeric")
  f <- as.formula(paste(s$response, "~", paste(s$regressors, collapse = " + ")))
  fit <- lm(f, data = d)
  if (any(is.na(coef(fit)))) stop(name, ": lm dropped an aliased column")
  v <- car::vif(fit)
  stopifnot(identical(names(v), s$regressors))
  vifs <- paste0("    ", q(names(v)), ": ", g17(unname(v)), collapse = ",\n")
  entries <- c(entries, paste0(
    "  ", q(name), ": {\n",
    "   \"csv\": ", q(s$csv), ",\n",
    "   \"response\": ", q(s$response), ",\n",
    "   \"rows\": ", nrow(d), ",\n",
    "   \"formula\": ", q(paste(deparse(f, width.cutoff = 500L), collapse = " ")), ",\n",
    "   \"vif\": {\n", vifs, "\n   }\n",
    "  }"))
}

out <- paste0(
  "{\n",
  " \"source\": \"vif_car.R in this directory (lm + car::vif)\",\n",
  " \"versions\": {\n",
  "  \"R\": ", q(paste0(R.version$major, ".", R.version$minor)), ",\n",
  "  \"R_version_string\": ", q(R.version.string), ",\n",
  "  \"car\": ", q(as.character(packageVersion("car"))), "\n",
  " },\n",
  " \"datasets\": {\n", paste(entries, collapse = ",\n"), "\n }\n",
  "}\n")
writeLines(out, "golden_car.json", sep = "")
