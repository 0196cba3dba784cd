# Golden values for plumb's generalized VIFs on public datasets with factors.
#
# Source: R's own `datasets` package and car::vif (Fox & Monette 1992), both
# from Debian's packages r-base-core and r-cran-car. Run from this folder:
#
#   Rscript vif.R > vif.txt
#
# It writes, for each model, the rows it used as <model>.csv (NA where R had
# NA; factors as their level text) and appends car::vif's table to vif.tsv:
# model, term, Df, GVIF, GVIF^(1/(2*Df)) printed with 17 significant digits.
# models.tsv says which columns each model uses (response first) and which
# of them are factors.
suppressPackageStartupMessages(library(car))
options(digits = 17)

models <- list(
  esoph = list(data = esoph, f = ncases ~ agegp + alcgp + tobgp + ncontrols),
  iris = list(data = iris, f = Sepal.Length ~ Sepal.Width + Petal.Length + Petal.Width + Species),
  infert = list(data = infert, f = case ~ education + age + parity + induced + spontaneous),
  CO2 = list(data = as.data.frame(CO2), f = uptake ~ conc + Type + Treatment),
  ToothGrowth = list(data = transform(ToothGrowth, dose_level = factor(dose)), f = len ~ supp + dose_level),
  npk = list(data = npk, f = yield ~ block + N + P + K),
  warpbreaks = list(data = warpbreaks, f = breaks ~ wool + tension),
  chickwts = list(data = transform(chickwts, feed_rank = as.numeric(feed) * 1.5 + (seq_along(feed) %% 7)), f = weight ~ feed + feed_rank),
  airquality = list(data = transform(airquality, month = factor(month.abb[Month], levels = month.abb[5:9])), f = Ozone ~ Solar.R + Wind + Temp + month)
)

cat("model\tterm\tdf\tgvif\tgvif_adjusted\n", file = "vif.tsv")
cat("model\tresponse\tcolumns\tfactors\n", file = "models.tsv")
for (name in names(models)) {
  m <- models[[name]]
  vars <- all.vars(m$f)
  d <- m$data[, vars, drop = FALSE]
  facs <- vars[sapply(d, is.factor)]
  out <- d
  for (v in facs) out[[v]] <- as.character(d[[v]])
  write.csv(out, paste0(name, ".csv"), row.names = FALSE, na = "NA")
  cat(name, vars[1], paste(vars[-1], collapse = ","), paste(facs, collapse = ","),
      sep = "\t", file = "models.tsv", append = TRUE)
  cat("\n", file = "models.tsv", append = TRUE)
  fit <- lm(m$f, data = d)
  v <- vif(fit)
  if (is.null(dim(v))) v <- cbind(GVIF = v, Df = 1, "GVIF^(1/(2*Df))" = sqrt(v))
  for (term in rownames(v)) {
    cat(name, term, v[term, "Df"], sprintf("%.17g", v[term, "GVIF"]),
        sprintf("%.17g", v[term, "GVIF^(1/(2*Df))"]), sep = "\t", file = "vif.tsv", append = TRUE)
    cat("\n", file = "vif.tsv", append = TRUE)
  }
  cat("==", name, "n =", nrow(model.frame(fit)), "\n")
  print(v)
}
cat("R", R.version.string, "car", as.character(packageVersion("car")), "\n")
