// Package elasticity turns estimated coefficients into what a pricing
// meeting needs: own- and cross-price elasticity tables with bands,
// markups (Lerner index, implied marginal cost, profit-maximising prices),
// price what-ifs, and the writers that put all of it into text, JSON, CSV
// and Markdown, and into the meeting pack (a self-contained HTML report
// with SVG plots, an XLSX workbook, CSV tables and a run record).
//
// Every number here rests on assumptions that the writers state beside it:
// elasticities are statistical estimates with uncertainty; markups from the
// inverse-elasticity rule assume a profit-maximising seller and no rival
// reaction; and pricing decisions can fall under competition and
// consumer-protection law.
package elasticity
